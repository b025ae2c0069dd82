"""A hand-built certificate of an invented job, for the report tests (no database)."""

from __future__ import annotations

from shopapp.reports.certificate import CertificateData, CorrectionLine, LimitLine, PlaneVector


def certificate_data(**overrides: object) -> CertificateData:
    """Invented shop, customer and rotor; numbers plausible for a 120 kg fan at G 6.3."""
    values: dict[str, object] = {
        "schema": 1,
        "number": "BC-2026-00017",
        "revision": 1,
        "revision_reason": "",
        "issued_at": "2026-11-05T14:30:00+00:00",
        "shop_name": "Northgate Rotor Works",
        "shop_address": "Unit 4, Quarry Lane, Eastfield",
        "customer_name": "Harbourside Air Handling Ltd",
        "customer_order_ref": "PO-88412",
        "job_number": "J2026-00042",
        "rotor_part_number": "FAN-710",
        "rotor_description": "two-plane fan impeller",
        "serial_number": "SN-4471",
        "mass_kg": 120.0,
        "service_speed_rpm": 1480.0,
        "balancing_speed_rpm": 600.0,
        "planes": 2,
        "radius_1_mm": 300.0,
        "radius_2_mm": 300.0,
        "bearing_a_mm": 0.0,
        "bearing_b_mm": 800.0,
        "centre_of_mass_mm": 400.0,
        "plane_1_mm": 150.0,
        "plane_2_mm": 650.0,
        "tolerance_method": "grade",
        "tolerance_basis": "ISO 21940-11 balance grade G 6.3",
        "grade_mm_s": 6.3,
        "u_per_gmm": 4877.72,
        "e_per_um": 40.6477,
        "journal_load_a_kg": None,
        "journal_load_b_kg": None,
        "reference_planes": "bearing_planes",
        "unit": "g·mm",
        "angle_convention": "degrees in the direction of rotation from the reference mark",
        "machine_name": "Bay 2 hard-bearing",
        "machine_kind": "hard-bearing",
        "machine_verified_on": "2026-03-10",
        "machine_verification": "passed",
        "received_on": "2026-11-02",
        "balanced_on": "2026-11-04",
        "initial_run": 1,
        "final_run": 4,
        "initial": (PlaneVector(1, 9000.0, 9000.0, 30.0), PlaneVector(2, 7000.0, 7000.0, 200.0)),
        "corrections": (
            CorrectionLine(1, "add", 30.0, 210.0, 300.0, ""),
            CorrectionLine(2, "add", 23.3, 20.0, 300.0,
                           "split: 12.0 g at position 1 (0°), 11.6 g at position 2 (45°)"),
        ),
        "residual": (PlaneVector(1, 600.0, 600.0, 75.0), PlaneVector(2, 450.0, 450.0, 310.0)),
        "limits": (
            LimitLine("bearing A", 2438.86, 2438.86, 700.0, 700.0, 28.7, True, True),
            LimitLine("bearing B", 2438.86, 2438.86, 420.0, 420.0, 17.2, True, True),
            LimitLine("plane 1", 1829.0, 1829.0, 600.0, 600.0, 32.8, True, False),
            LimitLine("plane 2", 1829.0, 1829.0, 450.0, 450.0, 24.6, True, False),
        ),
        "plot_limits_shop": (1829.0, 1829.0),
        "passed": True,
        "operator_name": "Ola Operator",
        "issued_by_name": "Quinn Quality",
    }
    values.update(overrides)
    return CertificateData(**values)  # type: ignore[arg-type]


# --- a job in the database that is ready for a certificate (service, web and CLI tests) ---

INITIAL_GMM = ((9000.0, 30.0), (7000.0, 200.0))  # plane 1, plane 2: g·mm at internal degrees
RESIDUAL_GMM = ((600.0, 75.0), (450.0, 310.0))


def job_ready_for_certificate(  # type: ignore[no-untyped-def]
    db, shop, operator, *, residual=RESIDUAL_GMM, machine=None, mark=True,
    split_2_g=(12.0, 11.6), plane_2=(23.3, 20.0), **job_kw
):
    """A two-plane fan job balanced on a calibrated (g·mm) machine and marked in tolerance.

    Invented values: 120 kg fan, G 6.3 at 1480 rpm; readings are g·mm so the
    residual is the reading itself. Uses the jobs service, as the shop floor would;
    ``mark=False`` leaves the job on the machine; ``split_2_g`` are the masses fitted
    on positions 1, 2, ... of plane 2, making up the correction ``plane_2`` (mass g,
    angle °) to within the split check of shopapp.jobs.corrections.
    """
    from shopapp.jobs.corrections import record_correction
    from shopapp.jobs.runs import record_run
    from shopapp.jobs.states import mark_in_tolerance

    machine = machine or shop.machine()
    rt = shop.rotor_type(positions_2=8, first_position_2_deg=0.0)
    rotor = shop.rotor(rt)
    job = shop.job(rotor, machine_id=machine.id, customer_order_ref="PO-88412", **job_kw)
    record_run(db, job, by=operator, purpose="initial", speed_rpm=600.0,
               readings=[(p + 1, a, g, "g·mm") for p, (a, g) in enumerate(INITIAL_GMM)])
    record_correction(db, job, by=operator, run_id=None, plane=1, action="add",
                      mass_g=30.0, angle_deg=210.0, radius_mm=300.0)
    record_correction(db, job, by=operator, run_id=None, plane=2, action="add",
                      mass_g=plane_2[0], angle_deg=plane_2[1], radius_mm=300.0,
                      split=[{"position": k, "mass_g": g} for k, g in enumerate(split_2_g, 1)])
    record_run(db, job, by=operator, purpose="check", speed_rpm=600.0,
               readings=[(p + 1, a, g, "g·mm") for p, (a, g) in enumerate(residual)])
    if mark:
        mark_in_tolerance(db, job, by=operator)
    db.flush()
    return job
