"""The traceability use-cases under their old names, for the features above that call them.

The code lives in :mod:`shopapp.traceability.verifications` (verification register,
proving rotors and tests), :mod:`shopapp.traceability.arbors` (arbors and index
runs) and :mod:`shopapp.traceability.keys` (key convention). New code imports those
modules; this re-export keeps the callers in jobs, certificates and the demo working
until they switch (``_records``, ``_run_phasors`` and ``get_settings`` included, which
``shopapp.jobs.evidence`` uses).
"""

from __future__ import annotations

from shopapp.core.settings import get_settings
from shopapp.traceability.arbors import (
    ARBOR_FIELDS,
    ARBOR_MASS_TOLERANCE,
    arbor_error_vector,
    arbor_mass_note,
    arbors,
    create_arbor,
    latest_arbor_error,
    record_arbor_error,
    run_phasors,
    separate_index_runs,
    update_arbor,
)
from shopapp.traceability.keys import KEY_FIELDS, KeyInfo, key_info, set_key_convention
from shopapp.traceability.verifications import (
    BLOCKING_STATES,
    CLEARED_BY,
    PROVING_ROTOR_FIELDS,
    STATES,
    TEST_UNBALANCE_FACTORS,
    MachineNotCurrent,
    PlaneProving,
    ProvingTestResult,
    VerificationStatus,
    claimed_umar_gmm,
    create_proving_rotor,
    equally_spaced_deg,
    evaluate_proving_test,
    machine_status,
    machines_due_soon,
    proving_rotors,
    record_proving_test,
    records_of,
    register,
    require_machine_current,
    status_from_records,
    verifications_of,
)

_records = records_of
_run_phasors = run_phasors

__all__ = [
    "ARBOR_FIELDS",
    "ARBOR_MASS_TOLERANCE",
    "BLOCKING_STATES",
    "CLEARED_BY",
    "KEY_FIELDS",
    "PROVING_ROTOR_FIELDS",
    "STATES",
    "TEST_UNBALANCE_FACTORS",
    "KeyInfo",
    "MachineNotCurrent",
    "PlaneProving",
    "ProvingTestResult",
    "VerificationStatus",
    "_records",
    "_run_phasors",
    "arbor_error_vector",
    "arbor_mass_note",
    "arbors",
    "claimed_umar_gmm",
    "create_arbor",
    "create_proving_rotor",
    "equally_spaced_deg",
    "evaluate_proving_test",
    "get_settings",
    "key_info",
    "latest_arbor_error",
    "machine_status",
    "machines_due_soon",
    "proving_rotors",
    "record_arbor_error",
    "record_proving_test",
    "records_of",
    "register",
    "require_machine_current",
    "run_phasors",
    "separate_index_runs",
    "set_key_convention",
    "status_from_records",
    "update_arbor",
    "verifications_of",
]
