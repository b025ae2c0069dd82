"""The demo's job timeline: every planned job played on its machine, then cut at the end.

Each job (:class:`JobSim`) is booked in, runs an initial run, learns its
coefficients from two trial runs or takes a stored set of the rotor type,
and is corrected until a check run passes (the core's verdict,
:class:`shopapp.demo.physics.Solver`); the operator fits the advice rounded
to the weights in stock with a hidden fitting error, so some jobs need
several cycles. Jobs that require one get their residual-unbalance test
before ``in_tolerance``. Then the certificate — only on a machine that was
current on the last run's date, the register rule of
:func:`shopapp.traceability.services.require_machine_current`: otherwise
quality waits for the machine's re-verification and has the rotor checked
again — dispatch, and any rework, return or reissue the plan says.

Nothing is dated after the end of the history (the moment the load
started): :meth:`JobSim.emit` cuts each timeline there and turns the rest
into rows; traceability records and certificates are collected as
operations for :mod:`shopapp.demo.replay`.
"""

from __future__ import annotations

import bisect
import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import bindparam, update

from shopapp.balancing.phasors import amplitude_angle, normalize_deg
from shopapp.core.numbering import format_number, per_year
from shopapp.demo import parallel
from shopapp.demo import physics as ph
from shopapp.demo import scenario as sc
from shopapp.demo.days import WORKDAY_START_MIN, add_working_days, at
from shopapp.demo.planning import Plan
from shopapp.demo.shop import Shop
from shopapp.jobs import advice, residual_tests
from shopapp.models import Correction, InfluenceSet, Job, JobTransition, Rotor, Run, RunReading
from shopapp.traceability import services as tr

Steps = Callable[[int, int], object]
# (at, order, job_id, kind, data); kind "arbor" | "rtest" | "cert"
Op = tuple[dt.datetime, int, int, str, dict[str, Any]]

MAX_CYCLES = 10  # a job that is still out after this many corrections is given up
STORED_SET_USE = 0.6  # chance an operator corrects from a stored set when one exists


def _learned(s: dict[str, Any]) -> tuple[dt.datetime, int]:
    """A stored set's place in its key's list (ids are positive, so ``(t, 0)`` cuts before
    every set learned at ``t``)."""
    return s["learned_at"], s["id"]


@dataclass
class _Event:
    at: dt.datetime
    kind: str  # tr | run | corr | learn | score | cert | arbor | rtest
    data: dict[str, Any]


class History:
    """The jobs of the history: simulated, written as rows, their services' work collected."""

    def __init__(self, shop: Shop, *, solver: ph.Solver, runs_per_job: int | None,
                 with_certificates: bool) -> None:
        self.shop = shop
        self.store = shop.store
        self.solver = solver
        self.runs_per_job = runs_per_job
        # The certificates service writes the "certified" transitions when it issues.
        self.with_certificates = with_certificates
        # Per (rotor type, machine, speed), sorted by (learned_at, id).
        self.sets: dict[tuple[int, int, float], list[dict[str, Any]]] = {}
        self.set_scores: dict[int, tuple[dt.datetime, float]] = {}
        self.cert_jobs: set[int] = set()
        self.ops: list[Op] = []
        self.timeline: dict[int, list[tuple[dt.datetime, str]]] = {}
        self.final: dict[int, tuple[str, dt.datetime]] = {}
        self.job_sets: list[dict[str, Any]] = []
        self.rtest_jobs = 0

    def simulate(self, plans: list[Plan], steps: Steps | None) -> None:
        """Run every job's physics in the order its first run happened, writing as it goes."""
        shop = self.shop
        order = sorted(plans, key=lambda p: (p.start_at or p.booked_at, p.idx))
        # Job numbers follow the booking order; ids too (returns come after their parent).
        # Jobs booked after the end are not written: they are the last numbers and ids.
        numbering: dict[tuple[str, int], int] = {}
        yearly = per_year(shop.pattern)
        for p in sorted(plans, key=lambda p: (p.booked_at, p.idx)):
            if p.booked_at > shop.end_at:
                continue
            p.job_id = self.store.ids.take(Job)
            key = (str(p.received.year) if yearly else "", 0)
            numbering[key] = numbering.get(key, 0) + 1
            p.number = format_number(shop.pattern, on=p.received, seq=numbering[key])
        self.store.insert(Rotor, shop.rotor_rows)
        shop.rotor_rows = []
        if self.store.to_driver:
            parallel.play(self, order, steps)  # bulk mode on SQLite
        else:
            self.play(order, steps)

    def play(self, order: list[Plan], steps: Steps | None, *, flush_every: int = 2000
             ) -> None:
        """Run the jobs of ``order`` (start order), their rows written (or sent) every
        ``flush_every`` jobs."""
        total = len(order)
        last = len(order) - 1
        for i, p in enumerate(order):
            parent = p.parent
            if p.job_id and (parent is None or (parent.result_dispatched_on is not None
                                                and parent.result_dispatched_on <= p.received)):
                JobSim(self, p).run()
            # else: booked after the end, or the earlier job had not left the shop
            if len(self.store.rows.jobs) >= flush_every:
                self.store.flush_rows()  # in emission order: a parent job before its return
            if steps is not None and (i % 50 == 0 or i == last):
                steps(i + 1, total)
        self.store.flush_rows()

    def write(self) -> None:
        """The influence sets (their scores are final only now), then the id sequences."""
        store = self.store
        sets = []
        for key_sets in self.sets.values():
            for s in key_sets:
                score = self.set_scores.get(s["id"])
                if score is not None:
                    s["last_used_at"], s["last_prediction_error_pct"] = score
                sets.append(s)
        sets.sort(key=lambda r: r["id"])
        store.insert(InfluenceSet, sets)
        store.counts["sets"] = len(sets)
        store.flush_rows()
        if self.job_sets:
            # The job rows went in before the sets (foreign keys), so their set comes now;
            # updated_at is given, or the column's onupdate would date the row now.
            job_t = Job.__table__
            for row in self.job_sets:
                row["upd"] = self.final[row["jid"]][1]
            store.session.execute(
                update(job_t).where(job_t.c.id == bindparam("jid"))
                .values(influence_set_id=bindparam("sid"), updated_at=bindparam("upd")),
                self.job_sets)
        store.move_sequences()
        store.session.flush()

    def state_before(self, job_id: int, moment: dt.datetime) -> str:
        """The job's state just before ``moment`` (from the transitions it was given)."""
        state = "booked_in"
        for t, to_state in self.timeline.get(job_id, ()):
            if t >= moment:
                break
            state = to_state
        return state


class JobSim:
    """Plays one job: physics, timeline, cut at the end of the history, rows."""

    def __init__(self, history: History, plan: Plan) -> None:
        self.h = history
        self.shop = history.shop
        self.p = plan
        self.rng = history.shop.rng
        self.tm = plan.rotor.type
        self.solver = history.solver
        self.events: list[_Event] = []
        self.runs: list[dict[str, Any]] = []  # local run records, index = seq - 1
        self.op_id = self.shop.users[plan.operator]
        self.person = sc.PEOPLE[plan.operator]
        self.a_est: ph.Matrix | None = None
        self.cond = 0.0
        self.source = "calibrated"
        self.stored: dict[str, Any] | None = None
        self.clock = plan.start_at or plan.booked_at
        # Intake default of the jobs service: the customer asks for it, or 4W/N.
        self.test_required = bool(self.shop.requires_test[self.tm.customer_id]
                                  or self.tm.spec.tolerance_method == "4w/n")
        # On the shop arbor: its true error is in the readings; the job subtracts the
        # latest measured one (None: not on the arbor, or nothing to subtract yet).
        self.arbor_true: ph.Pair | None = None
        self.arbor_sub: ph.Pair | None = None

    # ---------------------------------------------------------------- helpers

    def tick(self, lo: float, hi: float) -> dt.datetime:
        self.clock = self.clock + dt.timedelta(seconds=round(self.rng.uniform(lo, hi) * 60))
        return self.clock

    def day_at(self, day: dt.date, lo: float, hi: float) -> dt.datetime:
        self.clock = max(self.clock, at(day, WORKDAY_START_MIN + self.rng.uniform(lo, hi)))
        return self.clock

    def measure(self, u: ph.Pair) -> ph.Reading:
        return ph.measure(self.rng, self.p.rotor, u, self.arbor_true)

    def seen(self, reading: ph.Reading) -> ph.Pair:
        """The reading as the job evaluates it: less the arbor error it subtracts."""
        v = ph.phasors(reading)
        if self.arbor_sub is None:
            return v
        return v[0] - self.arbor_sub[0], v[1] - self.arbor_sub[1]

    def residual(self, reading: ph.Reading) -> ph.Pair:
        return self.solver.unbalance_gmm(self.a_est if not self.tm.calibrated else None,
                                         self.seen(reading), self.tm.radii)

    def add_run(self, purpose: str, reading: ph.Reading, within: bool | None = None,
                trial: tuple[int, float, float] | None = None) -> int:
        rec = {"purpose": purpose, "reading": reading, "within": within, "trial": trial,
               "by": self.op_id, "at": self.clock}
        self.runs.append(rec)
        self.events.append(_Event(self.clock, "run", {"index": len(self.runs) - 1}))
        return len(self.runs) - 1

    def tr(self, moment: dt.datetime, frm: str | None, to: str, reason: str = "",
           by: int | None = None, action: str = "") -> None:
        self.events.append(_Event(moment, "tr", {"from": frm, "to": to, "reason": reason,
                                                 "by": by or self.op_id, "action": action}))

    # ---------------------------------------------------------------- physics of the job

    def initial_unbalance(self) -> ph.Pair:
        rng = self.rng
        tm = self.tm
        visits = max(0, self.p.rotor.visits - 1)
        ratio = tm.spec.initial_ratio * math.exp(rng.gauss(0, 0.45))
        ratio *= self.p.rotor.growth ** visits
        if self.p.kind == "return":
            ratio *= 1.5
        ratio = min(max(ratio, 2.5), 60.0)
        out = []
        for i in (0, 1):
            lim = tm.tolerance.plane_limits_gmm[i]
            mag = ratio * lim * rng.uniform(0.5, 1.0) / tm.radii[i]
            out.append(ph.rect(mag, rng.uniform(0, 360)))
        return out[0], out[1]

    def choose_coefficients(self) -> None:
        tm = self.tm
        if tm.calibrated:
            self.source = "calibrated"
            self.a_est = (complex(tm.radii[0]), 0j, 0j, complex(tm.radii[1]))
            return
        assert self.p.start_at is not None
        key = (tm.id, tm.machine.id, tm.spec.balancing_speed_rpm)
        # The sets learned before this job's start are a prefix of the sorted list; the
        # latest of them is the one before the cut (a scan grew with the history: minutes
        # at 100 000 jobs).
        key_sets = self.h.sets.get(key, [])
        n_usable = bisect.bisect_left(key_sets, (self.p.start_at, 0), key=_learned)
        if n_usable and self.rng.random() < STORED_SET_USE:
            self.stored = key_sets[n_usable - 1]
            c = self.stored["coefficients"]
            self.a_est = tuple(complex(re, im) for re, im in c)  # type: ignore[assignment]
            self.source = "stored"
        else:
            self.source = "trials"

    def trials(self, u0: ph.Pair, v0: ph.Reading) -> None:
        """Two trial runs (mass removed before the next) and the coefficients from them."""
        rng = self.rng
        spec = self.tm.spec
        a = self.p.rotor.a_true
        v0c = ph.phasors(v0)
        trials = []
        for plane in (1, 2):
            mass = self.tm.trial_g[plane - 1]
            angle = spec.first_position_deg + (
                360.0 / spec.positions * rng.randrange(spec.positions) if spec.positions
                else rng.choice((0.0, 90.0, 180.0, 270.0)))
            angle = normalize_deg(angle)
            # The operator sizes the trial mass to move the reading by a third or more.
            for _ in range(6):
                col = (a[0], a[2]) if plane == 1 else (a[1], a[3])
                change = max(abs(col[0] * mass) / max(abs(v0c[0]), 1e-12),
                             abs(col[1] * mass) / max(abs(v0c[1]), 1e-12))
                if change >= 0.35:
                    break
                mass = ph.round_step(mass * 2.0, spec.stock_g)
            t = ph.rect(mass, angle)
            u = (u0[0] + t, u0[1]) if plane == 1 else (u0[0], u0[1] + t)
            self.tick(10, 25)
            reading = self.measure(u)
            self.add_run("trial", reading, trial=(plane, mass, angle))
            trials.append((plane, mass, angle, ph.phasors(reading)))
        self.a_est, self.cond = self.solver.coefficients(v0c, trials)

    def correct_until_passed(self, u: ph.Pair, answering: int, max_cycles: int = MAX_CYCLES
                             ) -> tuple[ph.Pair, bool]:
        """Correction, check run, … until a check (and any final runs) pass."""
        assert self.a_est is not None
        cycles = 0
        finals_due = self.p.final_runs
        while True:
            v = self.seen(self.runs[answering]["reading"])
            w = self.solver.correction(self.a_est, v)
            recs, effect = ph.fit(self.rng, self.tm, self.person, w)
            if recs:
                drilling = any(r["action"] == "remove" for r in recs)
                self.tick(20, 45) if drilling else self.tick(8, 25)
                self.events.append(_Event(self.clock, "corr",
                                          {"answering": answering, "recs": recs}))
            u = (u[0] + effect[0], u[1] + effect[1])
            cycles += 1
            self.tick(8, 18)
            reading = self.measure(u)
            ok = self.solver.passed(self.tm, self.residual(reading))
            idx = self.add_run("check", reading, within=ok)
            if self.stored is not None and recs:
                self.score(answering, recs, reading)
            if ok:
                extra = finals_due
                if self.h.runs_per_job:
                    extra = max(0, self.h.runs_per_job - len(self.runs))
                if extra:
                    idx, all_ok = self.final_runs(u, extra)
                    if all_ok:
                        return u, True
                    finals_due = 0
                else:
                    return u, True
            if cycles >= max_cycles:
                return u, False
            answering = idx

    def final_runs(self, u: ph.Pair, n: int) -> tuple[int, bool]:
        """``n`` repeat runs of the passed rotor, judged together; logged up to the first out."""
        readings = []
        moments = []
        for _ in range(n):
            moments.append(self.tick(4, 9))
            readings.append(self.measure(u))
        a = self.a_est if not self.tm.calibrated else None
        residuals = self.solver.unbalances_gmm(a, [self.seen(r) for r in readings],
                                               self.tm.radii)
        verdicts = self.solver.verdicts(self.tm, residuals)
        idx = len(self.runs) - 1
        for reading, moment, ok in zip(readings, moments, verdicts, strict=True):
            self.clock = moment
            idx = self.add_run("final", reading, within=ok)
            if not ok:
                return idx, False
        return idx, True

    def score(self, answering: int, recs: list[dict[str, Any]], reading: ph.Reading) -> None:
        """How well the stored set predicted this check run (as the jobs service scores it)."""
        assert self.stored is not None
        applied = [0j, 0j]
        for r in recs:
            flip = 180.0 if r["action"] == "remove" else 0.0
            if r["split"]:
                for part in r["split"]:
                    applied[r["plane"] - 1] += ph.rect(part["mass_g"], part["angle_deg"] + flip)
            else:
                applied[r["plane"] - 1] += ph.rect(r["mass_g"], r["angle_deg"] + flip)
        a = np.array(self.a_est, dtype=complex).reshape(2, 2)
        err = advice.prediction_error_pct(
            a, list(ph.phasors(self.runs[answering]["reading"])), applied,
            list(ph.phasors(reading)))
        self.events.append(_Event(self.clock, "score", {"set": self.stored["id"], "err": err}))

    # ---------------------------------------------------------------- the job's course

    def run(self) -> None:
        p = self.p
        rng = self.rng
        self.tr(p.booked_at, None, "booked_in",
                "booked in" if p.kind == "new" else "customer return", action="book_in")
        if p.fate == "reject_booked":
            assert p.reject_day is not None
            moment = max(at(p.reject_day, WORKDAY_START_MIN + rng.uniform(60, 420)),
                         p.booked_at + dt.timedelta(minutes=20))
            self.tr(moment, "booked_in", "rejected", p.reject_reason, action="reject")
            self.emit()
            return
        assert p.start_at is not None
        self.clock = p.start_at
        self.mount_on_arbor()
        u = self.initial_unbalance()
        self.choose_coefficients()
        self.tr(self.clock, "booked_in", "on_machine", "first run logged (initial)",
                action="start")
        v0 = self.measure(u)
        initial = self.add_run("initial", v0)
        if p.fate == "reject_machine":
            self.tick(10, 40)
            self.tr(self.clock, "on_machine", "rejected", p.reject_reason, action="reject")
            self.emit()
            return
        if self.source == "trials":
            self.trials(u, v0)
        if p.two_day:
            self.clock = at(add_working_days(self.clock.date(), 1),
                            WORKDAY_START_MIN + rng.uniform(0, 90))
        u, ok = self.correct_until_passed(u, initial)
        if ok:
            u, ok = self.residual_test(u)
        if ok:
            self.tick(1, 4)
            self.tr(self.clock, "on_machine", "in_tolerance", action="in_tolerance")
            if self.source == "trials":
                # A new set per learning job: an older job keeps the set it used (or those
                # learned before its initial run), so a later set never re-judges it.
                self.learn()
            self.certify_and_dispatch(u)
        else:
            self.give_up()
        self.emit()

    def give_up(self) -> None:
        """Still out after the cycles allowed: the job is rejected."""
        self.tick(5, 20)
        self.tr(self.clock, "on_machine", "rejected", sc.REJECT_ON_MACHINE[1], action="reject")

    def mount_on_arbor(self) -> None:
        """Impellers of the arbor's rotor type are balanced on the shop arbor."""
        shop = self.shop
        if not shop.arbor_plan or self.tm.spec.part_number != sc.ARBOR_ROTOR_TYPE:
            return
        day = self.clock.date()
        self.arbor_true = shop.arbor_true_error(day)
        known = [k for k, m in enumerate(shop.arbor_plan) if m[0] <= day]
        measurement = known[-1] if known else None
        if measurement is not None:
            self.arbor_sub = shop.arbor_plan[measurement][3]
        self.events.append(_Event(self.clock, "arbor", {"measurement": measurement,
                                                        "by": self.op_id}))

    def residual_test(self, u: ph.Pair) -> tuple[ph.Pair, bool]:
        """The residual-unbalance test of a job that requires one, before in_tolerance.

        Per plane the test mass the jobs feature suggests (2 × the plane's limit
        at the correction radius, in stock steps, not above it) at 8 positions
        and back at position 1; readings ``S·(U_res + T·e^{iθ_k})`` with ``S``
        the machine's sensitivity in that plane and ``U_res`` the rotor's true
        residual, noisy and rounded like the display. Judged as the service
        will (:func:`shopapp.jobs.evidence.evaluate_residual_test`): an invalid
        test is repeated, one over the limit means another correction. One job
        of the history gets a repeat of position 1 that disagrees.
        """
        if not self.test_required or not self.shop.exact:
            return u, True
        h = self.h
        h.rtest_jobs += 1
        spoil = h.rtest_jobs == 2
        for _attempt in range(6):
            ok = True
            for plane in (1, 2):
                for _try in range(6):
                    self.tick(12, 25)
                    rec, out = self.one_residual_test(u, plane, spoil)
                    spoil = False
                    self.events.append(_Event(self.clock, "rtest", rec))
                    if out.valid:
                        break
                if not (out.valid and out.within_tolerance):
                    ok = False
            if ok:
                return u, True
            self.p.final_runs = 0
            u, passed = self.correct_until_passed(u, len(self.runs) - 1, max_cycles=3)
            if not passed:
                return u, False
        return u, False

    def one_residual_test(self, u: ph.Pair, plane: int, spoil: bool
                          ) -> tuple[dict[str, Any], residual_tests.ResidualOutcome]:
        rng = self.rng
        tm = self.tm
        i = plane - 1
        radius = tm.radii[i]
        limit = tm.tolerance.plane_limits_gmm[i]
        step = tm.spec.stock_g
        factor = residual_tests.SUGGESTED_FACTOR
        mass = round(max(step, math.floor(factor * limit / radius / step) * step), 6)
        t_gmm = mass * radius
        a = self.p.rotor.a_true
        sens = (a[0] if plane == 1 else a[3]) / radius  # reading per g·mm in this plane
        u_res = u[i] * radius

        def read(theta: float) -> tuple[float, float]:
            z = sens * (u_res + ph.rect(t_gmm, theta))
            # A settled reading (the operator waits for the display): a third of a run's noise.
            sigma = 0.004 * abs(z) + tm.noise_abs / 3.0
            z += complex(rng.gauss(0, sigma), rng.gauss(0, sigma))
            amp, ang = amplitude_angle(z)
            return round(amp, tm.decimals), float(round(ang) % 360)

        pos = tr.equally_spaced_deg(8)
        points = [read(p) for p in pos]
        rep_amp, rep_ang = read(pos[0])
        if spoil:  # the rotor shifted on its supports during the test
            rep_amp = round(rep_amp * 1.3, tm.decimals)
        rec = {"plane": plane, "test_mass_g": mass, "test_radius_mm": radius, "positions": 8,
               "amplitudes": [x for x, _ in points], "angles_deg": [y for _, y in points],
               "repeat_amplitude": rep_amp, "repeat_angle_deg": rep_ang,
               "unit": tm.machine.spec.reading_unit, "by": self.op_id}
        out = residual_tests.evaluate_residual_test(
            plane=plane, test_mass_g=mass, test_radius_mm=radius, positions=8,
            amplitudes=rec["amplitudes"], angles_deg=rec["angles_deg"],
            repeat_amplitude=rep_amp, repeat_angle_deg=rep_ang, permissible_gmm=limit)
        return rec, out

    def learn(self) -> None:
        assert self.a_est is not None
        tm = self.tm
        s = {"id": self.h.store.ids.take(InfluenceSet), "rotor_type_id": tm.id,
             "machine_id": tm.machine.id, "speed_rpm": tm.spec.balancing_speed_rpm,
             "planes": 2, "coefficients": [[z.real, z.imag] for z in self.a_est],
             "reading_unit": tm.machine.spec.reading_unit, "condition_number": self.cond,
             "source_job_id": self.p.job_id, "last_prediction_error_pct": None,
             "last_used_at": None, "learned_at": self.clock}
        self.events.append(_Event(self.clock, "learn", {"set": s}))

    def machine_current(self, u: ph.Pair) -> tuple[ph.Pair, bool]:
        """Hold the certificate while the machine was overdue on the last run's date.

        The register rule the certificates service applies: quality reopens the
        job once the machine is re-verified and the rotor is checked again;
        ``False`` when that re-verification comes after the end of the history
        (the job waits in ``in_tolerance``) or the rotor no longer passes.
        """
        mm = self.tm.machine
        while mm.overdue_on(self.runs[-1]["at"].date()):
            last = self.runs[-1]["at"].date()
            verified = mm.next_test_after(last)
            if verified is None:
                return u, False
            earlier = [d for d in mm.tests if d <= last]
            interval = dt.timedelta(days=mm.spec.verification_interval_days)
            due = (earlier[-1] + interval) if earlier else last
            reason = sc.REOPEN_MACHINE_OVERDUE.format(
                machine=mm.spec.name + self.shop.tag, due=due.isoformat(),
                verified=verified.isoformat())
            self.p.reopen = ""  # the hold replaces any planned disturbance
            u, ok = self.recheck(u, "in_tolerance", add_working_days(
                verified, self.rng.choice((0, 1))), reason, by=self.shop.quality_id, kick=False)
            if not ok:
                return u, False
        return u, True

    def recheck(self, u: ph.Pair, frm: str, day: dt.date, reason: str, *,
                by: int | None = None, kick: bool = True) -> tuple[ph.Pair, bool]:
        """Reopen on ``day``: a check run, corrections until passed, back in tolerance.

        ``kick``: the rotor was disturbed (a loose or knocked weight).
        """
        self.day_at(day, 30, 300)
        self.tr(self.clock, frm, "on_machine", reason, by=by, action="reopen")
        if frm in ("certified", "dispatched"):
            self.events.append(_Event(self.clock, "cert", {"what": "void", "reason": reason}))
        if kick:
            # A loose or knocked weight: 1.5–4 × the plane limit appears in one plane.
            plane = self.rng.randrange(2)
            lim = self.tm.tolerance.plane_limits_gmm[plane] / self.tm.radii[plane]
            knock = ph.rect(self.rng.uniform(1.5, 4.0) * lim, self.rng.uniform(0, 360))
            u = (u[0] + knock, u[1]) if plane == 0 else (u[0], u[1] + knock)
        self.tick(20, 60)
        reading = self.measure(u)
        ok = self.solver.passed(self.tm, self.residual(reading))
        idx = self.add_run("check", reading, within=ok)
        if not ok:
            self.p.final_runs = 0
            u, ok = self.correct_until_passed(u, idx)
        if ok:
            u, ok = self.residual_test(u)
        if not ok:
            self.give_up()
            return u, False
        self.tick(1, 4)
        self.tr(self.clock, "on_machine", "in_tolerance", action="in_tolerance")
        return u, True

    def certify(self, u: ph.Pair, day: dt.date) -> tuple[ph.Pair, bool]:
        u, ok = self.machine_current(u)
        if not ok:
            return u, False
        # At least a minute after reaching tolerance (transitions keep their order).
        self.clock += dt.timedelta(minutes=1)
        self.day_at(day, 60, 480)
        self.tr(self.clock, "in_tolerance", "certified", by=self.shop.quality_id,
                action="certified")
        self.events.append(_Event(self.clock, "cert", {"what": "issue"}))
        return u, True

    def dispatch(self, day: dt.date) -> None:
        # At least a minute after the certificate, so the two transitions keep their order.
        self.clock += dt.timedelta(minutes=1)
        self.day_at(day, 90, 510)
        self.tr(self.clock, "certified", "dispatched", action="dispatch")

    def certify_and_dispatch(self, u: ph.Pair) -> None:
        p = self.p
        assert p.certify_day is not None and p.dispatch_day is not None
        if p.reopen == "disturbed_tol":
            self.rework(u, "in_tolerance", p.certify_day, self.rng.choice(sc.REOPEN_DISTURBED))
            return
        u, ok = self.certify(u, p.certify_day)
        if not ok:
            return
        if p.reopen == "disturbed_cert":
            self.rework(u, "certified", p.dispatch_day, self.rng.choice(sc.REOPEN_DISTURBED))
            return
        self.dispatch(p.dispatch_day)
        if p.reopen == "disturbed_disp":
            self.rework(u, "dispatched", p.reopen_day, sc.REOPEN_AFTER_DISPATCH)
            return
        if p.reissue_day is not None:
            self.day_at(p.reissue_day, 30, 450)
            self.events.append(_Event(self.clock, "cert", {"what": "reissue",
                                                           "reason": sc.REISSUE_REASON}))

    def rework(self, u: ph.Pair, frm: str, day: dt.date | None, reason: str) -> None:
        """Reopen after a disturbance: check, correct until passed, certify, dispatch."""
        p = self.p
        assert day is not None and p.certify2_day is not None and p.dispatch2_day is not None
        u, ok = self.recheck(u, frm, day, reason)
        if not ok:
            return
        u, ok = self.certify(u, max(p.certify2_day, self.clock.date()))
        if ok:
            self.dispatch(max(p.dispatch2_day, self.clock.date()))

    # ---------------------------------------------------------------- rows

    def emit(self) -> None:
        """Cut the timeline at the end of the history and turn it into rows."""
        h = self.h
        store = h.store
        p = self.p
        tm = self.tm
        job_id = p.job_id
        events = [e for e in self.events if e.at <= self.shop.end_at]
        state = "booked_in"
        first_tol: dt.datetime | None = None
        dispatched_on: dt.date | None = None
        reopen_count = 0
        reject_reason = ""
        run_ids: dict[int, int] = {}
        seq = 0
        started = False
        last_at = p.booked_at
        timeline: list[tuple[dt.datetime, str]] = []
        set_recorded = False
        for e in events:
            last_at = max(last_at, e.at)
            if e.kind == "tr":
                d = e.data
                timeline.append((e.at, d["to"]))
                if d["action"] == "certified" and h.with_certificates:
                    # Written by the certificates service when it issues (replay).
                    state = d["to"]
                    continue
                store.rows.transitions.append({
                    "id": store.ids.take(JobTransition), "job_id": job_id,
                    "from_state": d["from"], "to_state": d["to"], "reason": d["reason"],
                    "by_id": d["by"], "at": e.at})
                after: dict[str, Any] = {"state": d["to"]}
                if d["reason"]:
                    after["reason"] = d["reason"]
                if d["to"] == "in_tolerance" and first_tol is None:
                    first_tol = e.at
                if d["to"] == "dispatched":
                    dispatched_on = e.at.date()
                    after["dispatched_on"] = dispatched_on.isoformat()
                if d["action"] == "reopen":
                    reopen_count += 1
                    dispatched_on = None
                    after["reopen_count"] = reopen_count
                if d["to"] == "rejected":
                    reject_reason = d["reason"]
                if d["to"] == "on_machine" and not started:
                    started = True
                before = None if d["from"] is None else {"state": d["from"]}
                if d["action"] == "book_in":
                    after = {"number": p.number, "serial_number": p.rotor.serial,
                             "kind": p.kind, "state": "booked_in"}
                store.audit(e.at, d["by"], "job", job_id, d["action"], after=after,
                            before=before, job_id=job_id)
                state = d["to"]
            elif e.kind == "run":
                rec = self.runs[e.data["index"]]
                seq += 1
                rid = store.ids.take(Run)
                run_ids[e.data["index"]] = rid
                trial = rec["trial"]
                store.rows.runs.append({
                    "id": rid, "job_id": job_id, "seq": seq, "purpose": rec["purpose"],
                    "speed_rpm": tm.spec.balancing_speed_rpm,
                    "trial_plane": trial[0] if trial else None,
                    "trial_mass_g": trial[1] if trial else None,
                    "trial_angle_deg": trial[2] if trial else None,
                    "trial_radius_mm": tm.radii[trial[0] - 1] if trial else None,
                    "earlier_trial_left_on": False, "within_tolerance": rec["within"],
                    "notes": "", "by_id": rec["by"], "taken_at": e.at})
                unit = tm.machine.spec.reading_unit
                readings = []
                for plane, (amp, ang) in enumerate(rec["reading"], start=1):
                    store.rows.readings.append({"id": store.ids.take(RunReading), "run_id": rid,
                                                "plane": plane, "amplitude": amp,
                                                "angle_deg": ang, "unit": unit})
                    readings.append([plane, amp, ang, unit])
                after = {"seq": seq, "purpose": rec["purpose"], "readings": readings}
                if trial:
                    after.update(trial_plane=trial[0], trial_mass_g=trial[1],
                                 trial_angle_deg=trial[2])
                store.audit(e.at, rec["by"], "run", rid, "record_run", after=after,
                            job_id=job_id)
            elif e.kind == "corr":
                answering = run_ids[e.data["answering"]]
                if self.source == "stored" and self.stored is not None and not set_recorded:
                    # As jobs.record_correction does: the job keeps the set it used.
                    set_recorded = True
                    h.job_sets.append({"jid": job_id, "sid": self.stored["id"]})
                    store.audit(e.at, self.op_id, "job", job_id, "use_influence_set",
                                before={"influence_set_id": None},
                                after={"influence_set_id": self.stored["id"]}, job_id=job_id)
                for r in e.data["recs"]:
                    cid = store.ids.take(Correction)
                    store.rows.corrections.append({
                        "id": cid, "job_id": job_id, "run_id": answering, **r,
                        "applied_by_id": self.op_id, "applied_at": e.at})
                    store.audit(e.at, self.op_id, "correction", cid, "record_correction",
                                after={"plane": r["plane"], "action": r["action"],
                                       "mass_g": r["mass_g"], "angle_deg": r["angle_deg"],
                                       "run_id": answering}, job_id=job_id)
            elif e.kind == "learn":
                s = e.data["set"]
                key = (s["rotor_type_id"], s["machine_id"], s["speed_rpm"])
                bisect.insort(h.sets.setdefault(key, []), s, key=_learned)
                store.audit(e.at, self.op_id, "influence_set", s["id"], "learn",
                            after={"source_job_id": job_id, "speed_rpm": s["speed_rpm"],
                                   "condition_number": s["condition_number"]}, job_id=job_id)
            elif e.kind == "score":
                sid = e.data["set"]
                old = h.set_scores.get(sid)
                if old is None or old[0] <= e.at:
                    h.set_scores[sid] = (e.at, e.data["err"])
                store.audit(e.at, self.op_id, "influence_set", sid, "prediction_scored",
                            after={"last_prediction_error_pct": e.data["err"]}, job_id=job_id)
            elif e.kind == "cert":
                h.cert_jobs.add(job_id)
                if h.with_certificates:
                    h.ops.append((e.at, len(h.ops), job_id, "cert", dict(e.data)))
            elif e.kind in ("arbor", "rtest"):
                h.ops.append((e.at, len(h.ops), job_id, e.kind, dict(e.data)))
        h.timeline[job_id] = timeline
        h.final[job_id] = (state, last_at)
        p.result_state = state
        p.result_dispatched_on = dispatched_on if state == "dispatched" else None
        store.rows.jobs.append({
            "id": job_id, "number": p.number, "customer_id": tm.customer_id,
            "rotor_id": p.rotor.id, "machine_id": tm.machine.id,
            "operator_id": self.op_id if started else None, "state": state, "kind": p.kind,
            "return_of_job_id": p.parent.job_id if p.parent else None,
            "customer_order_ref": p.order_ref, "received_on": p.received,
            "promised_on": p.promised, "dispatched_on": dispatched_on,
            "first_in_tolerance_at": first_tol, **tm.tol_columns,
            "service_speed_rpm": tm.spec.service_speed_rpm,
            "balancing_speed_rpm": tm.spec.balancing_speed_rpm,
            "residual_test_required": self.test_required,
            "reopen_count": reopen_count, "reject_reason": reject_reason, "notes": p.notes,
            "created_at": p.booked_at, "updated_at": last_at,
        })
