"""Index balancing: rotor unbalance and arbor error from two runs."""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
import scipy.linalg

from shopapp.balancing.arbor import separate_arbor_error, subtract_arbor_error
from shopapp.balancing.errors import BalancingInputError


def _p(amplitude: float, angle_deg: float) -> complex:
    return cmath.rect(amplitude, math.radians(angle_deg))


def test_hand_computed_single_plane_case() -> None:
    # Hand computation: V1 = U_r + U_a = 10∠0, V2 = −U_r + U_a = 6∠0
    # → U_a = (10 + 6)/2 = 8∠0, U_r = (10 − 6)/2 = 2∠0.
    sep = separate_arbor_error([10 + 0j], [6 + 0j])
    assert sep.rotor[0] == pytest.approx(2 + 0j)
    assert sep.arbor[0] == pytest.approx(8 + 0j)
    assert sep.arbor_share[0] == pytest.approx(0.8)


# Simulation (marked as such): a two-plane linear machine with cross effects,
# reading = A · (rotor unbalance turned by the index + arbor error).
A = np.array([[0.9 * cmath.exp(-0.3j), 0.2 * cmath.exp(0.5j)],
              [0.15 * cmath.exp(1.1j), 1.1 * cmath.exp(-0.2j)]])
U_ROTOR = np.array([_p(120.0, 35.0), _p(80.0, 250.0)])
U_ARBOR = np.array([_p(30.0, 300.0), _p(45.0, 110.0)])


def _run(index_deg: float) -> np.ndarray:
    return A @ (U_ROTOR * cmath.exp(1j * math.radians(index_deg)) + U_ARBOR)


@pytest.mark.parametrize("index_deg", [180.0, 90.0, 120.0, 270.0])
def test_simulated_rotor_and_arbor_are_separated(index_deg: float) -> None:
    sep = separate_arbor_error(_run(0.0), _run(index_deg), index_deg=index_deg)
    # Readings are A·U; bring them back to g·mm with A⁻¹ (scipy as independent solver).
    rotor = scipy.linalg.solve(A, np.array(sep.rotor))
    arbor = scipy.linalg.solve(A, np.array(sep.arbor))
    np.testing.assert_allclose(rotor, U_ROTOR, rtol=1e-12)
    np.testing.assert_allclose(arbor, U_ARBOR, rtol=1e-12)


def test_general_index_agrees_with_an_independent_linear_solve() -> None:
    # The two runs as a 2×2 system [[1, 1], [e^{iα}, 1]]·[U_r, U_a] = [V1, V2],
    # solved by scipy (independent of the closed form in the module).
    alpha = 137.0
    v1, v2 = _p(14.0, 20.0), _p(9.0, 200.0)
    m = np.array([[1.0, 1.0], [cmath.exp(1j * math.radians(alpha)), 1.0]])
    u_r, u_a = scipy.linalg.solve(m, np.array([v1, v2]))
    sep = separate_arbor_error([v1], [v2], index_deg=alpha)
    assert sep.rotor[0] == pytest.approx(u_r, rel=1e-12)
    assert sep.arbor[0] == pytest.approx(u_a, rel=1e-12)


def test_second_reading_in_the_rotor_frame_is_turned_into_the_arbor_frame() -> None:
    # A reading whose angle is counted from the rotor's own mark lags the arbor
    # frame by the index angle: V2(rotor frame) = V2'(arbor frame)·e^{-iα}.
    v2_arbor = _run(180.0)
    v2_rotor = v2_arbor * cmath.exp(-1j * math.pi)
    a = separate_arbor_error(_run(0.0), v2_arbor)
    b = separate_arbor_error(_run(0.0), v2_rotor, second_frame="rotor")
    np.testing.assert_allclose(a.rotor, b.rotor, rtol=1e-12)
    np.testing.assert_allclose(a.arbor, b.arbor, rtol=1e-12)


def test_subtracting_the_arbor_error_gives_the_rotor_alone() -> None:
    sep = separate_arbor_error(_run(0.0), _run(180.0))
    # A later reading of the same rotor mounted at index 90° on the same arbor.
    later = _run(90.0)
    rotor = scipy.linalg.solve(A, np.array(subtract_arbor_error(later, sep.arbor, index_deg=90.0)))
    np.testing.assert_allclose(rotor, U_ROTOR, rtol=1e-12)


def test_a_large_arbor_error_warns() -> None:
    sep = separate_arbor_error([1 + 0j], [-1 + 0.1j + 3.0])  # mostly arbor
    assert sep.arbor_share[0] > 1.0
    assert any("seats the same way" in w for w in sep.warnings)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"index_deg": 10.0}, "index_deg"),
        ({"index_deg": 350.0}, "index_deg"),
        ({"index_deg": float("nan")}, "index_deg"),
        ({"second_frame": "spindle"}, "second_frame"),
    ],
)
def test_bad_index_input_is_refused(kwargs: dict, field: str) -> None:
    with pytest.raises(BalancingInputError) as exc:
        separate_arbor_error([1 + 0j], [2 + 0j], **kwargs)
    assert exc.value.field == field


def test_plane_counts_must_agree() -> None:
    with pytest.raises(BalancingInputError) as exc:
        separate_arbor_error([1 + 0j, 2 + 0j], [2 + 0j])
    assert exc.value.field == "second_run"
    with pytest.raises(BalancingInputError) as exc:
        subtract_arbor_error([1 + 0j], [1 + 0j, 2 + 0j])
    assert exc.value.field == "arbor_error"
    with pytest.raises(BalancingInputError) as exc:
        separate_arbor_error([], [])
    assert exc.value.field == "first_run"
