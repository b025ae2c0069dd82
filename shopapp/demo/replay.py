"""The demo's traceability records and certificates, written through their services.

After the job rows (:mod:`shopapp.demo.history`), in the order things
happened and dated then: proving rotors and proving tests
(:func:`shopapp.traceability.services.record_proving_test`), the shop
arbor's error history from index runs, key conventions on two rotor types,
the jobs balanced on the arbor, the residual-unbalance tests of the jobs
that require one (:meth:`Replay.evidence`); then every certificate through
:func:`shopapp.certificates.issue.issue` / ``reissue`` / ``void`` with its
historical time (:meth:`Replay.certificates`, the slow part: a PDF each),
signed with the instance's key like any other certificate (the signature's own
time is the moment of the load; the certificate states when it was issued).

Each job is put in the state it had at that moment (from the transitions
written for it) so the services judge it as they would have, then given
back its final state. :meth:`Replay.certificates` can run in slices, each
left for the caller to commit, so a first start serves the shop while the
certificates are still being issued; a job a person changed meanwhile is
left alone (its remaining certificates are not issued; :attr:`Replay.skipped`).
"""

from __future__ import annotations

import datetime as dt
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.certificates import issue as cert_service
from shopapp.certificates import queries as cert_queries
from shopapp.core.errors import ServiceError
from shopapp.core.settings import get_settings
from shopapp.demo import physics as ph
from shopapp.demo import scenario as sc
from shopapp.demo.days import at
from shopapp.demo.history import History, Op
from shopapp.demo.shop import ARBOR_INDEX_MIN, PROVING_TEST_MIN, RUN_UP_MIN, Shop
from shopapp.jobs import certificate_link, residual_tests
from shopapp.jobs import evidence as jt
from shopapp.jobs import facts as job_facts
from shopapp.models import AuditEvent, Job, Machine, Rotor, RotorType, User
from shopapp.resonance.samples import add_sample_run_up
from shopapp.traceability import services as tr

Steps = Callable[[int, int], object]


class DemoRefused(ServiceError):
    """The demo shop was not loaded (the database already holds a shop, or a record was refused)."""


def _date_new_audits(session: Session, moment: dt.datetime) -> None:
    """Date the audit events a service call just added (not yet flushed) at ``moment``."""
    for obj in session.new:
        if isinstance(obj, AuditEvent):
            obj.at = moment


class Replay:
    """Writes the collected operations of a history through the services (module docstring)."""

    def __init__(self, session: Session, shop: Shop, history: History, *,
                 signing_dir: Path | None, base_url: str) -> None:
        self.session = session
        # Passed to issue and reissue as a web page passes them: signed with the instance's
        # key, the verify address (and its QR code) on the shop's BASE_URL.
        self.signing_dir = signing_dir
        self.base_url = base_url
        self.shop = shop
        self.history = history
        ordered = sorted(history.ops, key=lambda o: (o[0], o[1]))
        self.evidence_ops = [o for o in ordered if o[3] != "cert"]
        self.cert_ops = [o for o in ordered if o[3] == "cert"]
        self.reissued = {job_id for _at, _o, job_id, _k, d in self.cert_ops
                         if d["what"] == "reissue"}
        self.done = 0  # certificate operations written (and committed by the caller)
        self.issued = 0  # certificate revisions issued
        self.skipped: dict[int, str] = {}  # job id → number: changed by a person meanwhile
        self.slice_issued = 0  # revisions the last slice issued
        self.arbor_row: Any = None
        self.arbor_rows: list[Any] = []

    @property
    def remaining(self) -> int:
        return len(self.cert_ops) - self.done

    def _users(self) -> tuple[User, dict[int, User]]:
        s = self.session
        users = {uid: s.get(User, uid) for uid in self.shop.users}
        quality = users[self.shop.quality_id]
        assert quality is not None and all(u is not None for u in users.values())
        return quality, users  # type: ignore[return-value]

    # ------------------------------------------------------------------ before the certificates

    def evidence(self) -> None:
        """The register, the arbor, key conventions, arbor jobs and residual tests (flushed)."""
        s = self.session
        quality, users = self._users()
        admin = users[self.shop.admin_id]
        self._register(quality, admin)
        with s.no_autoflush:  # the services flush what they write
            self._run(self.evidence_ops, users, quality)
        self._run_up(users)
        s.flush()

    def _run_up(self, users: dict[int, User]) -> None:
        """A run-up through a resonance on the latest fan job before the load's day.

        The shop records one before balancing a fan at speed (docs/resonance.md);
        the readings are invented (:mod:`shopapp.resonance.samples`), dated on the
        day the rotor came in, never after the load's "now".
        """
        s = self.session
        today = self.shop.end_at.date()
        if not self.history.final:
            return
        # This load's jobs as their id range, not a list of every id (minutes at 100 000
        # jobs): the ids are taken in one run after every earlier row's, and an id taken
        # for a job that was not played belongs to no row.
        first, last = min(self.history.final), max(self.history.final)
        job = s.scalar(
            select(Job).join(Rotor, Job.rotor_id == Rotor.id)
            .join(RotorType, Rotor.rotor_type_id == RotorType.id)
            .where(Job.id.between(first, last), Job.machine_id.is_not(None),
                   Job.received_on < today, Job.state != "rejected",
                   RotorType.kind == "fan")
            .order_by(Job.received_on.desc(), Job.id.desc()).limit(1))
        if job is None:
            return
        by = users[job.operator_id] if job.operator_id in users else users[self.shop.users[0]]
        rec = add_sample_run_up(s, job, by=by, recorded_on=job.received_on, today=today)
        rec.created_at = at(job.received_on, RUN_UP_MIN)
        _date_new_audits(s, rec.created_at)

    def _register(self, quality: User, admin: User) -> None:
        """Proving rotors and tests, the arbor's error history, key conventions."""
        s = self.session
        shop = self.shop
        t_setup = shop.t_setup
        rng = shop.register_rng
        for mm in shop.machines.values():
            spec = mm.spec
            machine = s.get(Machine, mm.id)
            assert machine is not None
            radius = sc.PROVING_RADIUS_MM.get(spec.key, 100.0)
            rotor = tr.create_proving_rotor(
                s, by=quality, name=spec.proving_rotor + shop.tag,
                mass_kg=spec.proving_rotor_mass_kg, planes=2, radius_1_mm=radius,
                radius_2_mm=radius, positions=8, notes="The shop's own proving rotor (demo).")
            rotor.created_at = t_setup
            _date_new_audits(s, t_setup)
            for day in mm.tests:
                row = tr.record_proving_test(
                    s, machine, by=quality, performed_on=day, proving_rotor=rotor,
                    notes="demo proving-rotor test",
                    **ph.proving_readings(rng, machine, rotor))
                if not row.passed:
                    raise DemoRefused(f"demo: the proving test of {machine.name} on {day} failed "
                                      f"({'; '.join(row.readings.get('reasons', []))})")
                row.created_at = at(day, PROVING_TEST_MIN)
                _date_new_audits(s, row.created_at)
        if shop.arbor_plan:
            spec = next(t for t in sc.ROTOR_TYPES if t.part_number == sc.ARBOR_ROTOR_TYPE)
            operator = s.get(User, shop.users[0])
            assert operator is not None
            self.arbor_row = tr.create_arbor(s, by=quality, name=sc.ARBOR_NAME + shop.tag,
                                             description=sc.ARBOR_DESCRIPTION, mass_kg=6.5)
            self.arbor_row.created_at = t_setup
            _date_new_audits(s, t_setup)
            for day, first, second, _measured in shop.arbor_plan:
                m = tr.record_arbor_error(
                    s, self.arbor_row, by=operator, measured_on=day, first_run=first,
                    second_run=second, planes=2, rotor_mass_kg=spec.mass_kg,
                    notes="Index runs with the reference impeller (0° and 180° on the arbor).")
                m.created_at = at(day, ARBOR_INDEX_MIN)
                _date_new_audits(s, m.created_at)
                self.arbor_rows.append(m)
        for tm in shop.types:
            key = sc.KEY_CONVENTIONS.get(tm.spec.part_number)
            if key is not None:
                rt = s.get(RotorType, tm.id)
                assert rt is not None
                tr.set_key_convention(s, rt, by=admin, **key)  # type: ignore[arg-type]
                _date_new_audits(s, t_setup)
        s.flush()

    # ------------------------------------------------------------------ the certificates

    def certificates(self, *, seconds: float | None = None, steps: Steps | None = None
                     ) -> int:
        """Issue, reissue and void from where the last call stopped; flushed, not committed.

        ``seconds``: stop after the operation that passes this much time (a
        slice for a first start); none: all that remain. Returns how many
        operations this call wrote; the caller commits, then calls :meth:`advance`.
        """
        s = self.session
        s.expire_all()  # a person may have changed a job since the last slice
        quality, users = self._users()
        end = None if seconds is None else time.monotonic() + seconds
        # Each job's facts once per slice, for its final state (see job_facts.deferred).
        with s.no_autoflush, job_facts.deferred(s):
            n = self._run(self.cert_ops[self.done:], users, quality, end=end, steps=steps)
        return n

    def advance(self, n: int) -> None:
        """The caller committed the ``n`` operations the last :meth:`certificates` wrote."""
        self.done += n
        self.issued += self.slice_issued

    # ------------------------------------------------------------------ one slice

    def _run(self, ops: list[Op], users: dict[int, User], quality: User, *,
             end: float | None = None, steps: Steps | None = None) -> int:
        """Write ``ops`` in order (until ``end``); then every touched job gets its final state."""
        s = self.session
        h = self.history
        touched: dict[int, Job] = {}
        self.slice_issued = 0
        n = 0
        try:
            for n, (moment, _order, job_id, kind, data) in enumerate(ops, start=1):
                if job_id in self.skipped:
                    continue
                job = touched.get(job_id)
                if job is None:
                    job = s.get(Job, job_id)
                    assert job is not None
                    if job.state != h.final[job_id][0]:
                        self.skipped[job_id] = job.number  # a person changed it meanwhile
                        continue
                    touched[job_id] = job
                job.state = h.state_before(job_id, moment)
                self._one(job, moment, kind, data, users, quality)
                if steps is not None and (n % 25 == 0 or n == len(ops)):
                    base, total = ((self.done, len(self.cert_ops)) if kind == "cert"
                                   else (0, len(self.evidence_ops)))
                    steps(base + n, total)
                if end is not None and time.monotonic() > end:
                    break
        finally:
            for job_id, job in touched.items():
                job.state, job.updated_at = h.final[job_id]
        return n

    def _one(self, job: Job, moment: dt.datetime, kind: str, data: dict[str, Any],
             users: dict[int, User], quality: User) -> None:
        s = self.session
        try:
            if kind == "arbor":
                by = users[data["by"]]
                jt.set_job_arbor(s, job, by=by, arbor=self.arbor_row)
                _date_new_audits(s, moment)
                if data["measurement"] is not None:
                    sub = jt.set_arbor_subtraction(
                        s, job, by=by, measurement=self.arbor_rows[data["measurement"]])
                    assert sub is not None
                    sub.at = moment
                _date_new_audits(s, moment)
            elif kind == "rtest":
                fields = {k: v for k, v in data.items() if k != "by"}
                residual_tests.record_residual_test(
                    s, job, by=users[data["by"]], performed_at=moment,
                                        **fields)
            elif data["what"] == "issue":
                order_ref = job.customer_order_ref
                if job.id in self.reissued and not cert_queries.job_certificates(s, job):
                    # The first copy carried the customer's order reference mistyped.
                    job.customer_order_ref = order_ref[:-1] + "0"
                cert_service.issue(s, job, by=quality, issued_at=moment,
                                   signing_dir=self.signing_dir, base_url=self.base_url)
                job.customer_order_ref = order_ref
                self.slice_issued += 1
            else:
                cert = certificate_link.current_certificate(s, job)
                if cert is None:
                    return
                if data["what"] == "reissue":
                    cert_service.reissue(s, cert, by=quality, reason=data["reason"],
                                         issued_at=moment, signing_dir=self.signing_dir,
                                         base_url=self.base_url)
                    self.slice_issued += 1
                else:
                    # The history already reopened the job: void as a reopen does
                    # (certificate_link), not as quality's void of a certified job.
                    certificate_link.void_certificate(
                        s, cert, by=quality, reason=f"job reopened: {data['reason']}", at=moment)
        except ServiceError as exc:
            raise DemoRefused(f"demo job {job.number} ({kind} at {moment.isoformat()}): "
                              f"{exc.message}") from None


def keep_shared_rows(session: Session) -> list[Any]:
    """The settings and machines every certificate reads (the session keeps rows only weakly)."""
    return [get_settings(session), *session.scalars(select(Machine))]
