"""The invented shop of ``shopapp demo load``: its people, customers, machines and rotors.

Everything here is made up for the demonstration. The names are plainly
fictional (no real company, brand or person is meant); rotor data are
plausible values for the kind of part, not any maker's drawing. The physics
parameters (``reading_gain``, ``initial_ratio`` …) drive the simulated
machine in :mod:`shopapp.demo.physics`.
"""

from __future__ import annotations

from dataclasses import dataclass

SHOP_NAME = "Quietspin Balancing Works (demo shop)"
SHOP_ADDRESS = "Unit 7, Invented Trading Estate\nDemotown DT1 0AA\n(fictional address)"


@dataclass(frozen=True)
class PersonSpec:
    """A demo user. ``skill_*`` are the hidden fitting errors of an operator (1 σ)."""

    role: str
    username: str
    full_name: str
    mass_error: float = 0.04  # relative error of a fitted mass
    angle_error_deg: float = 2.5  # error of where it is fitted


PEOPLE: tuple[PersonSpec, ...] = (
    PersonSpec("operator", "otto.spinwell", "Otto Spinwell", 0.03, 2.0),
    PersonSpec("operator", "pia.truerun", "Pia Truerun", 0.045, 3.0),
    # The newest hand: larger fitting errors, so more second cycles (the owner sees it).
    PersonSpec("operator", "cass.levelby", "Cass Levelby", 0.09, 6.0),
    PersonSpec("quality", "quinn.gauge", "Quinn Gauge", 0.03, 2.0),
    PersonSpec("owner", "oona.ledger", "Oona Ledger"),
    PersonSpec("admin", "ada.keys", "Ada Keys"),
)


@dataclass(frozen=True)
class CustomerSpec:
    key: str
    name: str
    contact: str
    email: str
    phone: str
    address: str
    notes: str = ""
    requires_residual_test: bool = False


CUSTOMERS: tuple[CustomerSpec, ...] = (
    CustomerSpec("gpm", "Glimmerford Paper Mill", "R. Featherstone (maintenance)",
                 "maintenance@glimmerford.example", "+00 100 200 301",
                 "Mill Lane 1, Glimmerford (fictional)",
                 "Rolls arrive on their own journals; explicit limits from the mill's drawings."),
    CustomerSpec("tfb", "Thistledown Fans & Blowers", "J. Marrowby (works)",
                 "works@thistledown.example", "+00 100 200 302",
                 "Blower Road 12, Thistledown (fictional)"),
    CustomerSpec("qwb", "Quillmere Water Board", "S. Pennywhistle (pump station)",
                 "pumps@quillmere.example", "+00 100 200 303",
                 "Reservoir Way 3, Quillmere (fictional)"),
    CustomerSpec("bmr", "Brassneck Motor Rewinds", "T. Coilworth", "shop@brassneck.example",
                 "+00 100 200 304", "Armature Street 44, Brassneck (fictional)"),
    CustomerSpec("lgw", "Lanternbridge Grinding Works", "H. Finegrain",
                 "spindles@lanternbridge.example", "+00 100 200 305",
                 "Spindle Yard 9, Lanternbridge (fictional)"),
    CustomerSpec("srs", "Saltmarsh Refinery Services", "D. Brinewell (rotating equipment)",
                 "rotating@saltmarsh.example", "+00 100 200 306",
                 "Jetty Road 2, Saltmarsh (fictional)",
                 "Balance to 4W/N per plane; residual-unbalance test on every job.",
                 requires_residual_test=True),
    CustomerSpec("sfs", "Snowmarsh Fleet Services", "K. Axleby", "fleet@snowmarsh.example",
                 "+00 100 200 307", "Depot Close 5, Snowmarsh (fictional)"),
    CustomerSpec("ckb", "Copperkettle Brewery", "M. Hopgood (engineering)",
                 "engineering@copperkettle.example", "+00 100 200 308",
                 "Mash Tun Row 8, Copperkettle (fictional)"),
)


@dataclass(frozen=True)
class MachineSpec:
    """A balancing machine and how its readings come out.

    ``reading_unit``: ``"g·mm"`` for a calibrated hard-bearing machine that
    shows unbalance per correction plane; ``"mm/s"`` (pedestal vibration of a
    hard-bearing machine) or ``"um"`` (displacement on a soft-bearing machine)
    need influence coefficients. ``history`` shapes the verification register
    at the demo's end date: ``"due_soon"``, ``"lapsed"`` (overdue for a while
    in the middle of the period) or ``"current"``.
    """

    key: str
    name: str
    bearing_kind: str
    min_mass_kg: float
    max_mass_kg: float
    min_speed_rpm: float
    max_speed_rpm: float
    claimed_emar_gmm_per_kg: float
    claimed_urr_pct: float
    suspension_resonance_rpm: float
    verification_interval_days: int
    reading_unit: str
    history: str
    proving_rotor: str
    proving_rotor_mass_kg: float
    notes: str = ""


MACHINES: tuple[MachineSpec, ...] = (
    MachineSpec("hb2", "Bay 1 — hard-bearing, 2 t", "hard", 20.0, 2000.0, 100.0, 2500.0,
                0.5, 90.0, 3600.0, 365, "mm/s", "due_soon",
                "Proving rotor PR-200", 200.0,
                "Pedestal vibration readout; influence coefficients per rotor type."),
    MachineSpec("hb03", "Bay 2 — hard-bearing, 300 kg, calibrated", "hard", 0.5, 300.0, 200.0,
                8000.0, 0.2, 95.0, 12000.0, 180, "g·mm", "lapsed",
                "Proving rotor PR-10", 10.0,
                "Permanently calibrated: shows unbalance per correction plane in g·mm."),
    MachineSpec("sb5", "Bay 3 — soft-bearing, 5 t", "soft", 100.0, 5000.0, 300.0, 1500.0,
                1.0, 85.0, 150.0, 365, "um", "current",
                "Proving rotor PR-1000", 1000.0,
                "Long-bed soft-bearing machine for rolls and large fans."),
)


@dataclass(frozen=True)
class RotorTypeSpec:
    """A rotor type of the catalogue, with how often it comes in and its simulated physics.

    ``tolerance_method`` is ``"grade"``, ``"4w/n"`` (journal loads half the
    rotor weight each) or ``"explicit"`` (``explicit_gmm`` per plane).
    ``initial_ratio``: median of the arriving unbalance as a multiple of the
    tolerance. ``stock_g``: the smallest step of weights fitted (add) or the
    scale resolution (remove).
    """

    customer: str
    part_number: str
    description: str
    kind: str
    mass_kg: float
    service_speed_rpm: float
    first_critical_rpm: float | None
    bearing_a_mm: float
    bearing_b_mm: float
    centre_of_mass_mm: float
    plane_1_mm: float
    plane_2_mm: float
    radius_1_mm: float
    radius_2_mm: float
    method: str
    machine: str
    balancing_speed_rpm: float
    serial_prefix: str
    fleet: int
    weight: float
    tolerance_method: str = "grade"
    tolerance_grade: float | None = 6.3
    explicit_gmm: float | None = None
    positions: int | None = None
    first_position_deg: float = 0.0
    density_g_cm3: float | None = None
    drill_diameter_mm: float | None = None
    stock_g: float = 0.5
    rotation: str = "cw"
    initial_ratio: float = 8.0
    notes: str = ""


ROTOR_TYPES: tuple[RotorTypeSpec, ...] = (
    RotorTypeSpec("gpm", "GPM-PR-850", "press roll, 850 kg", "roll", 850.0, 600.0, 2400.0,
                  0.0, 4200.0, 2100.0, 300.0, 3900.0, 380.0, 380.0, "add", "sb5", 480.0,
                  "PR", 6, 3.0, tolerance_method="explicit", tolerance_grade=None,
                  explicit_gmm=9000.0, positions=12, first_position_deg=15.0, stock_g=5.0,
                  initial_ratio=6.0, notes="Weights bolted into the 12 tapped holes per head."),
    RotorTypeSpec("gpm", "GPM-GR-140", "guide roll, 140 kg", "roll", 140.0, 900.0, 3000.0,
                  0.0, 1800.0, 900.0, 80.0, 1720.0, 120.0, 120.0, "add", "sb5", 600.0,
                  "GR", 24, 6.0, stock_g=1.0, initial_ratio=7.0),
    RotorTypeSpec("tfb", "TFB-CF-1250", "centrifugal fan impeller, overhung, 310 kg", "fan",
                  310.0, 1480.0, None, 0.0, 600.0, 900.0, 780.0, 1020.0, 560.0, 560.0, "add",
                  "hb2", 600.0, "CF", 30, 10.0, positions=10, stock_g=1.0, initial_ratio=9.0,
                  notes="Weights welded to the back plate at the blades."),
    RotorTypeSpec("tfb", "TFB-AX-800", "axial fan hub with blades, 45 kg", "fan", 45.0, 1470.0,
                  None, 0.0, 500.0, 250.0, 170.0, 330.0, 380.0, 380.0, "add", "hb03", 1200.0,
                  "AX", 40, 12.0, positions=12, stock_g=0.5, initial_ratio=10.0),
    RotorTypeSpec("ckb", "CKB-EXF-450", "extraction fan impeller, 22 kg", "fan", 22.0, 2900.0,
                  None, 0.0, 420.0, 230.0, 160.0, 300.0, 210.0, 210.0, "add", "hb03", 1500.0,
                  "EX", 12, 4.0, positions=6, stock_g=0.2, initial_ratio=8.0),
    RotorTypeSpec("qwb", "QWB-IMP-2S", "two-stage pump impeller set, 38 kg", "pump_impeller",
                  38.0, 2960.0, 9000.0, 0.0, 420.0, 210.0, 150.0, 270.0, 140.0, 140.0,
                  "remove", "hb03", 900.0, "IP", 20, 8.0, density_g_cm3=7.93,
                  drill_diameter_mm=8.0, stock_g=0.1, initial_ratio=7.0,
                  notes="Stainless; remove by drilling the shroud rim only."),
    RotorTypeSpec("qwb", "QWB-IMP-560", "single-stage pump impeller, 120 kg", "pump_impeller",
                  120.0, 1480.0, None, 0.0, 700.0, 350.0, 280.0, 420.0, 280.0, 280.0,
                  "remove", "hb2", 600.0, "IL", 10, 4.0, density_g_cm3=7.2,
                  drill_diameter_mm=12.0, stock_g=0.5, initial_ratio=8.0),
    RotorTypeSpec("ckb", "CKB-PMP-200", "wort pump impeller, 9 kg", "pump_impeller", 9.0,
                  2900.0, None, 0.0, 260.0, 140.0, 100.0, 180.0, 95.0, 95.0, "remove", "hb03",
                  1500.0, "WP", 8, 2.0, density_g_cm3=7.93, drill_diameter_mm=5.0,
                  stock_g=0.05, initial_ratio=6.0),
    RotorTypeSpec("bmr", "BMR-75K", "motor rotor 75 kW, 180 kg", "motor_rotor", 180.0, 1485.0,
                  4500.0, 0.0, 1100.0, 560.0, 300.0, 800.0, 150.0, 150.0, "add", "hb2", 800.0,
                  "MR", 35, 11.0, tolerance_grade=2.5, positions=12, stock_g=0.5,
                  initial_ratio=8.0, notes="Balance screws in the 12 holes of each end ring."),
    RotorTypeSpec("bmr", "BMR-15K", "motor rotor 15 kW, 40 kg", "motor_rotor", 40.0, 2950.0,
                  8000.0, 0.0, 600.0, 300.0, 180.0, 420.0, 75.0, 75.0, "remove", "hb03",
                  1500.0, "MS", 45, 12.0, tolerance_grade=2.5, density_g_cm3=2.70,
                  drill_diameter_mm=6.0, stock_g=0.1, initial_ratio=7.0,
                  notes="Drill the aluminium end rings; keep clear of the fan blades."),
    RotorTypeSpec("lgw", "LGW-SP-G1", "grinding spindle, 12 kg", "spindle", 12.0, 6000.0,
                  30000.0, 0.0, 360.0, 170.0, 60.0, 300.0, 45.0, 45.0, "remove", "hb03", 2400.0,
                  "GS", 14, 6.0, tolerance_grade=1.0, density_g_cm3=7.85, drill_diameter_mm=4.0,
                  stock_g=0.01, initial_ratio=5.0),
    RotorTypeSpec("lgw", "LGW-SP-M8", "milling spindle, 8 kg", "spindle", 8.0, 12000.0,
                  36000.0, 0.0, 300.0, 140.0, 40.0, 260.0, 38.0, 38.0, "add", "hb03", 3000.0,
                  "MSP", 10, 4.0, tolerance_grade=2.5, positions=8, stock_g=0.01,
                  initial_ratio=5.0, notes="Set screws in the 8 tapped holes of each ring."),
    RotorTypeSpec("srs", "SRS-BFP-6", "six-stage pump rotor, 210 kg", "pump_impeller", 210.0,
                  2980.0, 7000.0, 0.0, 1600.0, 800.0, 350.0, 1250.0, 110.0, 110.0, "remove",
                  "hb2", 900.0, "BF", 8, 3.0, tolerance_method="4w/n", tolerance_grade=None,
                  density_g_cm3=7.85, drill_diameter_mm=8.0, stock_g=0.1, initial_ratio=12.0),
    RotorTypeSpec("srs", "SRS-CWP-65", "cooling-water pump impeller, 65 kg", "pump_impeller",
                  65.0, 1485.0, None, 0.0, 520.0, 260.0, 200.0, 320.0, 190.0, 190.0, "remove",
                  "hb2", 600.0, "CW", 10, 3.0, tolerance_method="4w/n", tolerance_grade=None,
                  density_g_cm3=7.2, drill_diameter_mm=10.0, stock_g=0.1, initial_ratio=10.0),
    RotorTypeSpec("sfs", "SFS-WA-22", "utility-vehicle wheel assembly, 28 kg", "wheel", 28.0,
                  1100.0, None, 0.0, 250.0, 400.0, 330.0, 470.0, 200.0, 200.0, "add", "hb03",
                  400.0, "WA", 60, 6.0, tolerance_grade=40.0, stock_g=5.0, initial_ratio=6.0,
                  notes="Clip-on rim weights in 5 g steps, inner and outer rim."),
    RotorTypeSpec("sfs", "SFS-YT-42", "yard-tractor wheel assembly, 42 kg", "wheel", 42.0, 900.0,
                  None, 0.0, 250.0, 420.0, 340.0, 500.0, 230.0, 230.0, "add", "hb03", 400.0,
                  "YT", 30, 3.0, tolerance_grade=40.0, stock_g=5.0, initial_ratio=6.0),
)

REJECT_BEFORE_RUN: tuple[str, ...] = (
    "Crack found at a blade root during incoming inspection; customer informed, not balanced.",
    "Customer withdrew the order before the rotor was balanced.",
    "Journals out of round (0.04 mm); customer to regrind before balancing.",
    "Rotor with coupling hub is heavier than the machine's rated load; sent back.",
)
REJECT_ON_MACHINE: tuple[str, ...] = (
    "Initial unbalance is far beyond what the correction planes can take; rotor needs repair "
    "first.",
    "Readings not repeatable from run to run (loose part inside suspected); returned unbalanced.",
)
REOPEN_DISTURBED: tuple[str, ...] = (
    "Balance weight found loose at final inspection; refitted and balance rechecked.",
    "Rotor knocked against the rack while being moved; balance rechecked.",
)
REOPEN_AFTER_DISPATCH = (
    "Customer found a correction weight not locked; rotor came back under the same order."
)
REOPEN_MACHINE_OVERDUE = (
    "Verification of {machine} was overdue on the run date (due {due}); check run repeated "
    "after re-verification on {verified}."
)
RETURN_NOTES: tuple[str, ...] = (
    "Customer reports high vibration after installation.",
    "Rotor rubbed on site; rebalance after the customer's repair.",
    "Bearing replaced on site, vibration still high at the drive end.",
)
JOB_NOTES: tuple[str, ...] = (
    "",
    "",
    "",
    "Rush: customer's line is down.",
    "Customer asks for the removed material to be shown on the certificate.",
    "Deliver with the shaft ends greased and capped.",
)
REISSUE_REASON = "Customer's order reference corrected on request."

# Proving rotors: test-mass radius per machine key (mm), 8 holes per plane (invented).
PROVING_RADIUS_MM = {"hb2": 140.0, "hb03": 50.0, "sb5": 230.0}

# The shop arbor for impellers without their own shaft (invented). Its error (g·mm per
# plane, arbor frame) drifts slowly as the seat wears: from ``ARBOR_ERROR_GMM`` at the
# start to ``ARBOR_DRIFT`` times that, turned by ``ARBOR_TURN_DEG``, at the end.
ARBOR_NAME = "Arbor A-30 (impeller mandrel, 30 mm seat)"
ARBOR_DESCRIPTION = "Ground mandrel for the extraction-fan impellers"
ARBOR_ROTOR_TYPE = "CKB-EXF-450"
ARBOR_ERROR_GMM = ((14.0, 40.0), (9.0, 215.0))
ARBOR_DRIFT = 1.6
ARBOR_TURN_DEG = 25.0
ARBOR_MEASURE_EVERY_DAYS = 61

# Key conventions on rotor types with a keyed shaft end (part number → convention and
# key size in mm; invented sizes of the usual kind).
KEY_CONVENTIONS: dict[str, dict[str, float | str]] = {
    "BMR-75K": {"convention": "half_key", "key_width_mm": 14.0, "key_height_mm": 9.0,
                "key_length_mm": 100.0, "hub_length_mm": 90.0, "key_radius_mm": 27.0,
                "key_angle_deg": 0.0},
    "BMR-15K": {"convention": "half_key", "key_width_mm": 8.0, "key_height_mm": 7.0,
                "key_length_mm": 50.0, "hub_length_mm": 50.0, "key_radius_mm": 14.0,
                "key_angle_deg": 0.0},
}
