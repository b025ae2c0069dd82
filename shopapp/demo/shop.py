"""The demo shop set up: people, customers, machines, rotor types and their register plans.

:class:`Shop` writes the rows of :mod:`shopapp.demo.scenario` (dated a month
before the history starts) and keeps what the simulation needs of them: the
physics of each rotor type on its machine (:mod:`shopapp.demo.physics`),
the days each machine's proving test is made and the arbor's index runs.

The proving tests are planned so that the shop stays consistent: consecutive
tests are never more than the machine's interval apart, so a machine is
overdue only where the scenario wants it (``history="lapsed"``: one lapse
in the middle of a long enough history, ended by a re-verification), and
the last test before the end leaves it current (or due soon).
"""

from __future__ import annotations

import datetime as dt
import math
import random
import secrets
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.accounts.users import hash_password
from shopapp.balancing import influence
from shopapp.balancing.planes import transfer_matrix
from shopapp.core.numbering import DEFAULT_PATTERN
from shopapp.demo import physics as ph
from shopapp.demo import scenario as sc
from shopapp.demo.days import add_working_days, at, working_day_on_or_before
from shopapp.demo.store import Store
from shopapp.jobs import calc as job_calc
from shopapp.models import Customer, Job, Machine, Rotor, RotorType, ShopSettings, User

Login = tuple[str, str, str]

PROVING_TEST_MIN = 15 * 60  # the time of day a proving test is recorded
ARBOR_INDEX_MIN = 8 * 60  # the time of day the arbor's index runs are recorded
# Consecutive proving tests are planned this many days inside the interval; moved to a
# working day they stay at least a week inside it (the year-end closure moves up to 12 days).
TEST_SLACK_DAYS = 21
LAPSE_DAYS = 25  # how long the lapsed machine stays overdue before its re-verification


class Shop:
    """The invented shop's rows and models for one load (see the module docstring)."""

    def __init__(self, session: Session, *, rng: random.Random, start: dt.date,
                 end_at: dt.datetime, tag: str, exact: bool, fleet_scale: float) -> None:
        self.session = session
        self.rng = rng
        self.start = start
        self.end_at = end_at
        self.end = end_at.date()
        self.tag = tag
        self.exact = exact
        self.fleet_scale = fleet_scale
        self.store = Store(session, bulk=not exact)
        self.t_setup = at(start - dt.timedelta(days=30), 9 * 60)
        self.users: list[int] = []  # ids in sc.PEOPLE order
        self.quality_id = 0
        self.admin_id = 0
        self.requires_test: dict[int, bool] = {}
        self.machines: dict[str, ph.MachineModel] = {}
        self.types: list[ph.TypeModel] = []
        self.rotor_rows: list[dict[str, Any]] = []
        # (measured_on, first run, second run, measured error per plane)
        self.arbor_plan: list[tuple[dt.date, list[tuple[float, float]],
                                    list[tuple[float, float]], ph.Pair]] = []
        # A stream of its own, so the register does not shift the jobs' physics.
        self.register_rng = random.Random(rng.random())
        self.shop_name = sc.SHOP_NAME + tag
        self.pattern = DEFAULT_PATTERN if not tag else (
            "D" + tag.strip(" []").split()[-1] + "-{year}-{seq:05d}")

    # ------------------------------------------------------------------ rows

    def setup(self) -> list[Login]:
        """Write the people, customers, machines and rotor types; return the logins."""
        s = self.session
        rng = self.rng
        store = self.store
        t_setup = self.t_setup
        self._settings()
        logins: list[Login] = []
        user_rows = []
        taken = set(s.scalars(select(User.username)))
        for person in sc.PEOPLE:
            name = person.username
            k = 2
            while name in taken:
                name = f"{person.username}{k}"
                k += 1
            taken.add(name)
            password = secrets.token_urlsafe(9)
            uid = store.ids.take(User)
            user_rows.append({
                "id": uid, "username": name, "full_name": person.full_name + self.tag,
                "role": person.role, "password_hash": hash_password(password), "active": True,
                "created_at": t_setup,
            })
            self.users.append(uid)
            logins.append((person.role, name, password))
            store.audit(t_setup, None, "user", uid, "create",
                        after={"username": name, "role": person.role})
        roles = [p.role for p in sc.PEOPLE]
        self.quality_id = self.users[roles.index("quality")]
        self.admin_id = self.users[roles.index("admin")]
        store.insert(User, user_rows)

        customer_ids: dict[str, int] = {}
        rows = []
        for c in sc.CUSTOMERS:
            cid = store.ids.take(Customer)
            customer_ids[c.key] = cid
            rows.append({"id": cid, "name": c.name + self.tag, "contact": c.contact,
                         "email": c.email, "phone": c.phone, "address": c.address,
                         "notes": c.notes, "requires_residual_test": c.requires_residual_test,
                         "archived": False, "created_at": t_setup})
            store.audit(t_setup, self.admin_id, "customer", cid, "create",
                        after={"name": c.name + self.tag})
        store.insert(Customer, rows)
        self.requires_test = {customer_ids[c.key]: c.requires_residual_test
                              for c in sc.CUSTOMERS}

        rows = []
        for m in sc.MACHINES:
            mid = store.ids.take(Machine)
            self.machines[m.key] = ph.MachineModel(
                m, mid, phase_deg=(rng.uniform(-40, 40), rng.uniform(-40, 40)))
            rows.append({"id": mid, "name": m.name + self.tag, "bearing_kind": m.bearing_kind,
                         "min_mass_kg": m.min_mass_kg, "max_mass_kg": m.max_mass_kg,
                         "min_speed_rpm": m.min_speed_rpm, "max_speed_rpm": m.max_speed_rpm,
                         "claimed_emar_gmm_per_kg": m.claimed_emar_gmm_per_kg,
                         "claimed_urr_pct": m.claimed_urr_pct,
                         "suspension_resonance_rpm": m.suspension_resonance_rpm,
                         "verification_interval_days": m.verification_interval_days,
                         "notes": m.notes, "archived": False, "created_at": t_setup})
            store.audit(t_setup, self.admin_id, "machine", mid, "create",
                        after={"name": m.name + self.tag})
        store.insert(Machine, rows)
        self._verifications()
        self._arbor_plan()

        rows = []
        for spec in sc.ROTOR_TYPES:
            tm = self._type_model(spec, customer_ids[spec.customer])
            self.types.append(tm)
            cols = {c.key: getattr(tm.row, c.key) for c in RotorType.__table__.columns
                    if c.key not in ("id", "created_at")}
            rows.append({"id": tm.id, **cols, "created_at": t_setup})
            store.audit(t_setup, self.users[0], "rotor_type", tm.id, "create",
                        after={"part_number": spec.part_number})
        store.insert(RotorType, rows)
        s.flush()
        return logins

    def _settings(self) -> None:
        """Name the shop in an empty database; beside an existing shop, change nothing."""
        if self.tag:
            return
        s = self.session
        row = s.get(ShopSettings, 1)
        if row is None:
            s.add(ShopSettings(id=1, shop_name=self.shop_name, shop_address=sc.SHOP_ADDRESS,
                               job_number_pattern=DEFAULT_PATTERN, updated_at=self.t_setup))
            s.flush()
        else:
            # An empty shop whose admin saved settings already: keep them, use its pattern.
            self.pattern = row.job_number_pattern
            self.shop_name = row.shop_name

    # ------------------------------------------------------------------ the register

    def _verifications(self) -> None:
        """Proving-test days through the period, shaped by each machine's ``history``.

        Recorded through the traceability service after the job rows
        (:func:`shopapp.demo.replay.register`), each at :data:`PROVING_TEST_MIN`
        of its day — never after the end of the history.
        """
        for mm in self.machines.values():
            m = mm.spec
            interval = m.verification_interval_days
            span = (self.end - self.start).days
            lapse_from = self.start + dt.timedelta(days=int(0.45 * span))
            lapse_to = add_working_days(lapse_from + dt.timedelta(days=LAPSE_DAYS), 0)
            if m.history == "lapsed" and lapse_to <= self.end - dt.timedelta(days=10):
                # The last test before the lapse decides when it fell due.
                last = working_day_on_or_before(lapse_from - dt.timedelta(days=interval))
                dates = self._tests_back(last, interval)
                dates += self._tests_forward(lapse_to, interval)
                mm.lapse = (last + dt.timedelta(days=interval), lapse_to)
            elif m.history == "due_soon":
                # Due about nine days after the end (a working day on or after that).
                dates = self._tests_back(
                    add_working_days(self.end - dt.timedelta(days=interval - 9), 0), interval)
            else:
                dates = self._tests_back(
                    working_day_on_or_before(self.end - dt.timedelta(days=interval // 2)),
                    interval)
            mm.tests = sorted(d for d in set(dates) if at(d, PROVING_TEST_MIN) <= self.end_at)

    def _tests_back(self, last: dt.date, interval: int) -> list[dt.date]:
        """``last`` and earlier working days, each less than ``interval`` before the next,
        back to the first one before the history starts."""
        out = [last]
        d = last
        while d >= self.start:
            d = working_day_on_or_before(d - dt.timedelta(days=interval - TEST_SLACK_DAYS))
            out.append(d)
        return out

    def _tests_forward(self, first: dt.date, interval: int) -> list[dt.date]:
        """``first`` and later working days, each less than ``interval`` after the one
        before, up to the end of the history."""
        out = [first]
        d = first
        while True:
            d = working_day_on_or_before(d + dt.timedelta(days=interval - TEST_SLACK_DAYS))
            if d > self.end:
                return out
            out.append(d)

    def _arbor_plan(self) -> None:
        """The arbor's index runs over the period and the error each gives (demo only).

        Its true error drifts linearly (:func:`shopapp.demo.physics.arbor_true_error`);
        every :data:`~shopapp.demo.scenario.ARBOR_MEASURE_EVERY_DAYS` a reference
        impeller is run on it at 0° and 180° (:func:`shopapp.demo.physics.index_runs`).
        """
        if not self.exact or not any(spec.part_number == sc.ARBOR_ROTOR_TYPE
                                     for spec in sc.ROTOR_TYPES):
            return
        rng = self.register_rng
        d = self.start - dt.timedelta(days=20)
        while d <= self.end:
            day = add_working_days(d, 0)
            if at(day, ARBOR_INDEX_MIN) <= self.end_at:
                first, second, measured = ph.index_runs(rng, self.arbor_true_error(day))
                self.arbor_plan.append((day, first, second, measured))
            d += dt.timedelta(days=sc.ARBOR_MEASURE_EVERY_DAYS)

    def arbor_true_error(self, day: dt.date) -> ph.Pair:
        """The arbor's true error on ``day`` (g·mm per plane, arbor frame)."""
        return ph.arbor_true_error(self.start, self.end, day)

    # ------------------------------------------------------------------ rotor types, rotors

    def _type_model(self, spec: sc.RotorTypeSpec, customer_id: int) -> ph.TypeModel:
        mm = self.machines[spec.machine]
        row = RotorType(
            customer_id=customer_id, part_number=spec.part_number,
            description=spec.description, kind=spec.kind, one_off=False, mass_kg=spec.mass_kg,
            service_speed_rpm=spec.service_speed_rpm, first_critical_rpm=spec.first_critical_rpm,
            bearing_a_mm=spec.bearing_a_mm, bearing_b_mm=spec.bearing_b_mm,
            centre_of_mass_mm=spec.centre_of_mass_mm, plane_1_mm=spec.plane_1_mm,
            plane_2_mm=spec.plane_2_mm, radius_1_mm=spec.radius_1_mm,
            radius_2_mm=spec.radius_2_mm, method_1=spec.method, method_2=spec.method,
            positions_1=spec.positions, positions_2=spec.positions,
            first_position_1_deg=spec.first_position_deg,
            first_position_2_deg=spec.first_position_deg, density_g_cm3=spec.density_g_cm3,
            tolerance_grade=spec.tolerance_grade if spec.tolerance_method == "grade" else None,
            tolerance_gmm=spec.explicit_gmm if spec.tolerance_method == "explicit" else None,
            rotation=spec.rotation, key_convention="none", notes=spec.notes, archived=False,
        )
        tol_cols: dict[str, Any] = {"tolerance_method": spec.tolerance_method,
                                    "tolerance_grade": None, "journal_load_a_kg": None,
                                    "journal_load_b_kg": None, "explicit_limit_1_gmm": None,
                                    "explicit_limit_2_gmm": None}
        if spec.tolerance_method == "grade":
            tol_cols["tolerance_grade"] = spec.tolerance_grade
        elif spec.tolerance_method == "4w/n":
            tol_cols["journal_load_a_kg"] = tol_cols["journal_load_b_kg"] = spec.mass_kg / 2.0
        else:
            tol_cols["explicit_limit_1_gmm"] = tol_cols["explicit_limit_2_gmm"] = spec.explicit_gmm
        probe = Job(service_speed_rpm=spec.service_speed_rpm, **tol_cols)
        jt = job_calc.job_tolerance(probe, row)
        transfer = transfer_matrix(spec.plane_1_mm, spec.plane_2_mm, spec.bearing_a_mm,
                                   spec.bearing_b_mm)
        if jt.reference == "bearing_planes":
            assert jt.bearing_limits_gmm is not None
            limits = ph.Limits(jt.reference, np.array(jt.bearing_limits_gmm, dtype=float),
                               np.array(transfer, dtype=float))
        else:
            limits = ph.Limits(jt.reference, np.array(jt.plane_limits_gmm[:2], dtype=float),
                               None)
        radii = (spec.radius_1_mm, spec.radius_2_mm)
        level = 0.5 * (jt.plane_limits_gmm[0] + jt.plane_limits_gmm[1])
        a_nom = ph.plant(self.rng, spec, mm, radii, level, transfer)
        # Reading of a tolerance-sized unbalance: the display shows ~3 digits of it.
        tol_reading = abs(a_nom[0]) * level / radii[0]
        decimals = min(3, max(0, 2 - math.floor(math.log10(tol_reading))))
        u_mar = mm.spec.claimed_emar_gmm_per_kg * spec.mass_kg
        noise_abs = 0.3 * u_mar * tol_reading / level + 0.5 * 10.0 ** -decimals
        trial = [0.0, 0.0]
        if mm.spec.reading_unit != "g·mm":
            for i in (0, 1):
                adv = influence.trial_mass_advice(spec.mass_kg, spec.balancing_speed_rpm,
                                                  radii[i], planes=2).mass_g
                trial[i] = ph.nice_mass(adv, spec.stock_g)
        tid = self.store.ids.take(RotorType)
        row.id = tid
        return ph.TypeModel(spec, tid, customer_id, mm, row, jt, limits, radii, a_nom,
                            noise_abs, decimals, (trial[0], trial[1]), tol_cols,
                            fleet_target=max(2, round(spec.fleet * self.fleet_scale)),
                            serial_width=max(4, len(str(round(spec.fleet * self.fleet_scale)))))

    def new_rotor(self, tm: ph.TypeModel) -> ph.RotorModel:
        """A new serial of the type: its own plant, a little off the type's."""
        rng = self.rng
        n = len(tm.fleet) + 1
        spread = 0.008 if tm.calibrated else 0.02
        a = tuple(x * (1.0 + rng.gauss(0, spread)) * ph.rect(1.0, rng.gauss(0, 1.0))
                  for x in tm.a_nominal)
        rid = self.store.ids.take(Rotor)
        serial = f"{tm.spec.serial_prefix}-{n:0{tm.serial_width}d}"
        growth = 1.35 if rng.random() < 0.15 else 1.0
        r = ph.RotorModel(tm, rid, serial, a, growth)  # type: ignore[arg-type]
        tm.fleet.append(r)
        self.rotor_rows.append({"id": rid, "customer_id": tm.customer_id,
                                "rotor_type_id": tm.id, "serial_number": serial, "notes": "",
                                "archived": False, "created_at": at(self.start, 7 * 60)})
        return r
