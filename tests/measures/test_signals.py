"""Issue 17, "the owner's view tells signal from noise": intervals, tested changes, funnel
plots, p-charts, rework machine time, drift, like-for-like periods, JSON and CSV shapes.

Independent references, each named where it is used:

* statsmodels ``proportion_confint(method="wilson")`` for the 95 % intervals and
  ``proportions_ztest`` for the pooled two-proportion z-test;
* exact binomial quantiles summed from ``math.comb`` (the smallest count whose
  cumulative probability reaches q — the textbook definition of a discrete quantile)
  and ``scipy.stats.binom.ppf`` for the funnel limits;
* Montgomery's p-chart, p̄ ± 3·√(p̄(1 − p̄)/n) with p̄ = Σx/Σn (*Introduction to
  Statistical Quality Control*, attributes charts — from memory) for the control limits;
* ``scipy.stats.linregress`` for the drift slopes and their p-values;
* hand counts of the constructed shops (tests/measures_shop.py), and
  ``shopapp.measures.stats.machine_time`` fed with the run timestamps in Python as the
  reference for the machine time the SQL adds up.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import math
import re
from html import unescape
from urllib.parse import parse_qs, urlsplit

import pytest
from pypdf import PdfReader
from scipy import stats as sps
from sqlalchemy import select
from statsmodels.stats.proportion import proportion_confint, proportions_ztest

from shopapp.measures import costs, routes
from shopapp.measures import services as measures
from shopapp.measures.periods import Period
from shopapp.measures.stats import CAUTION, machine_time
from shopapp.models import Job, JobTransition, MachineVerification, Run
from tests import measures_shop
from tests.measures_shop import REWORK_TODAY, TODAY

OCT = Period.month(2026, 10)
YEAR = Period.year(2026)


@pytest.fixture()
def hand(db, shop, make_user):  # type: ignore[no-untyped-def]
    return measures_shop.build(db, shop, make_user)


@pytest.fixture()
def rework_shop(db, shop, make_user):  # type: ignore[no-untyped-def]
    return measures_shop.build_rework(db, shop, make_user)


def _rates(obj: object) -> list[dict]:  # type: ignore[type-arg]
    """Every rate object anywhere in the JSON."""
    found = []
    if isinstance(obj, dict):
        if set(obj) == {"value", "numerator", "denominator", "interval_95"}:
            found.append(obj)
        for v in obj.values():
            found += _rates(v)
    elif isinstance(obj, list):
        for v in obj:
            found += _rates(v)
    return found


def _binomial_quantile(q: float, n: int, p: float) -> int:
    """Smallest k with P(X ≤ k) ≥ q for X ~ Binomial(n, p), summed from math.comb."""
    total = 0.0
    for k in range(n + 1):
        total += math.comb(n, k) * p**k * (1 - p) ** (n - k)
        if total >= q - 1e-12:
            return k
    return n


# ------------------------------------------------------------------ rates and JSON
def test_every_json_rate_is_an_object_with_the_wilson_interval_of_statsmodels(
    runner, hand
) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(args=["report", "shop", "--month", "2026-10", "--json",
                                 "--as-of", "2026-11-15"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    for name in ("first_pass_rate", "rework_rate", "promised_hit_rate", "rejection_rate"):
        assert set(data[name]) == {"value", "numerator", "denominator", "interval_95"}, name
        assert set(data["previous"][name]) == set(data[name])
    rates = _rates(data)
    assert len(rates) > 40  # top level, previous, every slice, trend month and funnel unit
    for r in rates:
        assert r["numerator"] <= r["denominator"]
        if r["denominator"] == 0:
            assert r["value"] is None and r["interval_95"] is None
            continue
        low, high = proportion_confint(r["numerator"], r["denominator"], alpha=0.05,
                                       method="wilson")
        assert r["value"] == pytest.approx(r["numerator"] / r["denominator"])
        assert r["interval_95"] == pytest.approx([low, high], abs=1e-9), r
    # October: rework 2 of 6 (J4, J10), rejection 3 of 9 (J7, J11, J12 of the 9 that left)
    assert (data["rework_rate"]["numerator"], data["rework_rate"]["denominator"]) == (2, 6)
    assert (data["rejection_rate"]["numerator"], data["rejection_rate"]["denominator"]) == (3, 9)


def test_small_counts_get_no_verdict_and_the_test_is_named(hand, db) -> None:  # type: ignore[no-untyped-def]
    report = measures.shop_report(db, OCT, by=None, today=TODAY)
    rework = report.changes["rework_rate"]
    # 2 of 6 against 1 of 1: the old report said "up … (worse)"; now no verdict at all
    assert rework.verdict == "too few jobs"
    assert rework.text == "too few jobs: 2 of 6 against 1 of 1 (fewer than 5)"
    data = report.to_json()["changes"]["rework_rate"]
    assert data["verdict"] == "too few jobs" and data["test"] is None


def test_a_real_first_pass_gain_is_called_better_with_the_z_test_of_statsmodels(
    db, rework_shop
) -> None:  # type: ignore[no-untyped-def]
    report = measures.shop_report(db, YEAR, by=None, today=REWORK_TODAY)
    # 2026 in progress on 12-15: compared with 2025-01-01 … 2025-12-15 (like with like),
    # so the five jobs of 2025-12-20 stay out: 12 of 40 then, 165 of 165 now.
    assert report.previous_period == Period(dt.date(2025, 1, 1), dt.date(2025, 12, 15))
    assert (report.previous.first_pass_jobs, report.previous.first_pass_judged) == (12, 40)
    assert (report.figures.first_pass_jobs, report.figures.first_pass_judged) == (165, 165)
    change = report.changes["first_pass_rate"]
    assert change.verdict == "better"
    assert change.comparison is not None and change.comparison.test == "z_pooled"
    _z, p_ref = proportions_ztest([165, 12], [165, 40])  # pooled, two-sided
    assert change.comparison.p_value == pytest.approx(p_ref, rel=1e-9)
    assert change.text.startswith("better: 165 of 165 against 12 of 40 (z-test, p < 0.001)")


# ------------------------------------------------------------------ funnels
def test_the_operator_whose_rework_is_truly_higher_is_flagged_and_the_small_one_is_not(
    db, rework_shop
) -> None:  # type: ignore[no-untyped-def]
    report = measures.shop_report(db, YEAR, by=None, today=REWORK_TODAY)
    uf = report.funnels["rework_rate"]["operator"]
    units = {uf.rows[str(u.key)].label: u for u in uf.funnel.units}
    assert uf.funnel.target == pytest.approx(24 / 165)  # 16 + 3 + 2 + 3 of 40 + 60 + 5 + 60
    ada, cy = units["Ada High"], units["Cy Small"]
    assert (ada.rate.numerator, ada.rate.denominator) == (16, 40)
    assert (cy.rate.numerator, cy.rate.denominator) == (2, 5)  # the same 40 %
    p = 24 / 165
    # Exact binomial limits (math.comb sums, and scipy): 16 of 40 is above the 99.8 %
    # upper count; 2 of 5 is inside its (much wider) limits.
    for n, x, flagged in ((40, 16, True), (5, 2, False), (60, 3, False)):
        high = _binomial_quantile(0.999, n, p)
        assert high == int(sps.binom.ppf(0.999, n, p))
        assert (x > high) is flagged
    assert ada.flag == "above" and cy.flag is None
    assert {u.flag for name, u in units.items() if name != "Ada High"} == {None}
    flags = report.funnel_flags()
    assert [(f["rate"], f["dimension"], f["label"]) for f in flags] == [
        ("rework_rate", "operator", "Ada High")]
    assert flags[0]["sentence"] == (
        "operator Ada High: 16 reworked jobs in 40 jobs, above what chance explains")


def test_funnel_limits_in_the_json_are_exact_binomial_quantiles(
    runner, rework_shop
) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(args=["report", "shop", "--month", "2026-02", "--json",
                                 "--as-of", "2026-12-15"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    seen = 0
    for name, per_dim in data["funnels"].items():
        for dim, f in per_dim.items():
            p = f["target"]
            for u in f["units"]:
                n = u["rate"]["denominator"]
                low95, high95 = (_binomial_quantile(q, n, p) / n for q in (0.025, 0.975))
                low, high = (_binomial_quantile(q, n, p) / n for q in (0.001, 0.999))
                assert u["limits_95"] == pytest.approx([low95, high95]), (name, dim, u)
                assert u["limits_99_8"] == pytest.approx([low, high]), (name, dim, u)
                seen += 1
    assert seen >= 8
    # every flag of the JSON list carries unit, counts and limits
    for flag in data["funnel_flags"]:
        assert {"rate", "dimension", "key", "label", "numerator", "denominator",
                "interval_95", "limits_95", "limits_99_8", "flag", "sentence"} <= set(flag)


def test_page_names_the_flagged_operator_once_with_the_caution_and_links_its_jobs(
    client, login_as, monkeypatch, rework_shop
) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(routes, "_today", lambda: REWORK_TODAY)
    login_as("owner")
    html = client.get("/dashboard").get_data(as_text=True)
    assert unescape(html).count(CAUTION) == 1  # once, plainly
    flagged = re.findall(r'<li data-flag="rework_rate operator">(.*?)</li>', html, re.S)
    assert len(flagged) == 1 and "Ada High" in flagged[0]
    link = re.search(r'href="([^"]+)">The jobs</a>', flagged[0])
    assert link
    query = parse_qs(urlsplit(unescape(link.group(1))).query)
    assert query["operator_id"] == [str(rework_shop.users["A"].id)]
    assert query["reworked"] == ["window"]
    # the link lists the jobs counted: Ada High's 16 reworked jobs (by hand, measures_shop)
    listed = client.get(unescape(link.group(1))).get_data(as_text=True)
    assert len(re.findall(r'<td><a href="/jobs/\d+">', listed)) == 16
    # the funnel chart is on the page, its flagged point links to the same jobs and is named
    svg = re.search(r'id="chart-rework_rate-operator">(.*?)</figure>', html, re.S)
    assert svg and "Ada High" in svg.group(1) and unescape(link.group(1)) in unescape(
        svg.group(1))
    assert "Cy Small" not in re.sub(r"<title>.*?</title>", "", svg.group(1))  # not named
    # the rest of the owner's three questions, on the same first page: is first pass
    # really better than last year, and what did rework cost in machine hours?
    row = re.search(r'<tr data-measure="first_pass_rate">(.*?)</tr>', html, re.S)
    assert row and "better: 165 of 165 against 12 of 40 (z-test" in unescape(row.group(1))
    cost = re.search(r'<p data-cost="summary">(.*?)</p>', html, re.S)
    assert cost and "12.0 h of rework on 24 jobs" in cost.group(1)


# ------------------------------------------------------------------ p-charts
def test_p_chart_limits_follow_the_textbook_formula(db, hand) -> None:  # type: ignore[no-untyped-def]
    report = measures.shop_report(db, OCT, by=None, today=TODAY)
    for name, (num, den) in {"first_pass_rate": ("first_pass_jobs", "first_pass_judged"),
                             "rework_rate": ("reworked_jobs", "reached_in_tolerance")}.items():
        chart = report.control_charts[name]
        xs = [getattr(r.figures, num) for r in report.trend]
        ns = [getattr(r.figures, den) for r in report.trend]
        p_bar = sum(xs) / sum(ns)
        assert chart.centre == pytest.approx(p_bar)
        for point, x, n in zip(chart.points, xs, ns, strict=True):
            if n == 0:
                assert point.lcl is None and point.ucl is None
                continue
            half = 3 * math.sqrt(p_bar * (1 - p_bar) / n)  # Montgomery
            assert point.lcl == pytest.approx(max(0.0, p_bar - half))
            assert point.ucl == pytest.approx(min(1.0, p_bar + half))
            assert point.outside == ("above" if x / n > p_bar + half
                                     else "below" if x / n < p_bar - half else None)
    # hand counts: rework months are Mar J13, Apr J15, Jun J14, Jul J16 (0 of 1 each),
    # Sep J5 (1 of 1, returned), Oct 2 of 6 → p̄ = 3/11
    assert report.control_charts["rework_rate"].centre == pytest.approx(3 / 11)


# ------------------------------------------------------------------ machine time
def _reference_seconds(db, jobs, start, stop, idle):  # type: ignore[no-untyped-def]
    """First-time and rework seconds by the definition, with stats.machine_time as the
    arithmetic: each job's runs cut at its reopenings, gaps ending in [start, stop)."""
    first = rework = 0.0
    for job in jobs:
        runs = db.scalars(select(Run).where(Run.job_id == job.id).order_by(Run.taken_at)).all()
        reopens = db.scalars(select(JobTransition.at).where(
            JobTransition.job_id == job.id, JobTransition.to_state == "on_machine",
            JobTransition.from_state.in_(("in_tolerance", "certified", "dispatched")))).all()
        segments: dict[int, list[dt.datetime]] = {}
        for r in runs:
            segments.setdefault(sum(1 for t in reopens if t <= r.taken_at), []).append(r.taken_at)
        for seg, times in segments.items():
            counted = [t for t in times if start <= t < stop]
            if not counted:
                continue
            # the gap before a counted run belongs to it: include the run before it
            before = [t for t in times if t < start]
            series = ([before[-1]] if before else []) + counted
            secs = machine_time(series, idle).seconds
            if seg > 0 or job.kind == "return":
                rework += secs
            else:
                first += secs
    return first, rework


def test_machine_time_split_matches_the_definition_and_the_hand_count(db, hand) -> None:  # type: ignore[no-untyped-def]
    report = measures.shop_report(db, OCT, by=None, today=TODAY)
    t = report.cost.total
    # first-time: J1 0.5 h, J2 2.0 h (four gaps of an hour or more, 0.5 h each), J3 0.5,
    # J4 0.5 (its run after the reopening stands alone), J10 0.5; J8 and J11 one run each
    assert (t.first_seconds, t.first_jobs) == (4 * 3600, 7)
    # rework: J6 (return) 09:00 → 10:30 = 0.5 h; J4 and J10 one run after their reopening
    assert (t.rework_seconds, t.rework_jobs) == (1800, 3)
    start, stop = measures_shop.at("2026-10-01", 0), measures_shop.at("2026-11-01", 0)
    first, rework = _reference_seconds(db, list(hand.jobs.values()), start, stop, 1800.0)
    assert (t.first_seconds, t.rework_seconds) == (first, rework)


def test_rework_cost_in_hours_and_money_with_its_reasons(db, rework_shop) -> None:  # type: ignore[no-untyped-def]
    settings = costs.cost_settings({"MACHINE_HOURLY_RATE": "60", "MONEY_UNIT": "EUR",
                                    "MACHINE_IDLE_MINUTES": 30})
    report = measures.shop_report(db, YEAR, by=None, today=REWORK_TODAY, costs=settings)
    cost = report.cost
    # 24 reworked jobs, each run again at 14:30 and 15:00 after its reopening: 0.5 h each
    assert cost.total.rework_seconds == 24 * 1800 and cost.total.rework_jobs == 24
    assert cost.total.first_seconds == 165 * 1800  # 09:00 → 10:00, capped at 30 min
    assert cost.rework_money == pytest.approx(12 * 60.0)
    start, stop = measures_shop.at("2026-01-01", 0), measures_shop.at("2027-01-01", 0)
    first, rework = _reference_seconds(db, rework_shop.jobs, start, stop, 1800.0)
    assert (cost.total.first_seconds, cost.total.rework_seconds) == (first, rework)
    # Pareto by machine time: Ada's 16 × 0.5 h "weight found loose", then 8 × 0.5 h
    assert [(r.reason, r.reworks, r.hours) for r in cost.reasons] == [
        ("weight found loose", 16, 8.0), ("knocked in transport", 8, 4.0)]
    assert [r.cumulative_percent for r in cost.reasons] == pytest.approx([200 / 3, 100.0])
    by_op = {s.label: s.time for s in cost.by["operator"]}
    assert by_op["Ada High"].rework_seconds == 16 * 1800
    with pytest.raises(Exception, match="MACHINE_HOURLY_RATE"):
        costs.cost_settings({"MACHINE_HOURLY_RATE": "lots"})


# ------------------------------------------------------------------ rework definition
def test_rework_counts_within_90_days_against_the_job_that_came_back(
    db, shop, make_user
) -> None:  # type: ignore[no-untyped-def]
    op = make_user("operator", full_name="Window Operator")
    machine = shop.machine()
    rotor = shop.rotor()

    def reached_job(received: str) -> Job:
        return measures_shop._plain_job(db, shop, rotor, op, machine,
                                        dt.date.fromisoformat(received), first_pass=True,
                                        rework_reason=None)

    late = reached_job("2026-03-02")  # reopened 100 days after reaching: not counted
    db.add(JobTransition(job_id=late.id, from_state="dispatched", to_state="on_machine",
                         at=measures_shop.at("2026-06-11"), reason="late"))
    returned = reached_job("2026-03-09")  # came back as a return 30 days later: counted
    shop.job(rotor, kind="return", return_of_job_id=returned.id,
             received_on=dt.date(2026, 4, 9), operator_id=op.id)
    future = reached_job("2026-03-16")  # returned after the report's date: not yet counted
    shop.job(rotor, kind="return", return_of_job_id=future.id, received_on=dt.date(2026, 4, 20),
             operator_id=op.id)
    db.commit()
    march = Period.month(2026, 3)
    fig = measures.period_figures(db, march, by=None, today=dt.date(2026, 4, 15))
    assert (fig.reworked_jobs, fig.reached_in_tolerance) == (1, 3)
    later = measures.period_figures(db, march, by=None, today=dt.date(2026, 12, 1))
    assert (later.reworked_jobs, later.reached_in_tolerance) == (2, 3)


# ------------------------------------------------------------------ drift
def test_rotor_drift_slope_and_p_value_match_linregress(db, hand) -> None:  # type: ignore[no-untyped-def]
    report = measures.shop_report(db, OCT, by=None, today=TODAY)
    drift = {d.serial_number: d for d in report.drift.rotors}
    r1 = drift["HS-R1"]  # visits 03-02, 06-01, 10-05 with 10, 15, 25 g·mm in plane 1
    assert r1.measure == "% of limit" and len(r1.visits) == 3
    # the same limit at each visit, so the percentages keep the readings' proportions
    assert [v / r1.values[0] for v in r1.values] == pytest.approx([1.0, 1.5, 2.5])
    days = [v.received_on.toordinal() for v in r1.visits]
    ref = sps.linregress(days, r1.values)
    assert r1.slope_per_year == pytest.approx(ref.slope * 365.25)
    assert r1.p_value == pytest.approx(ref.pvalue)
    assert r1.mean_interval_days == pytest.approx((days[-1] - days[0]) / 2)
    assert not r1.rising  # p ≈ 0.06 on three visits: could be chance


def test_machine_warned_when_its_proving_tests_reach_the_claim_by_the_due_date(
    db, shop
) -> None:  # type: ignore[no-untyped-def]
    creeping = shop.machine(name="Creeping machine", verification_interval_days=365)
    steady = shop.machine(name="Steady machine", verification_interval_days=365)
    for machine, values in ((creeping, (0.5, 0.7, 0.9)), (steady, (0.5, 0.45, 0.5))):
        for year, umar in zip((2024, 2025, 2026), values, strict=True):
            db.add(MachineVerification(machine_id=machine.id, performed_on=dt.date(year, 3, 2),
                                       proving_rotor="PR-1", measured_umar_gmm=umar,
                                       claimed_umar_gmm=1.0, passed=True))
    db.commit()
    report = measures.shop_report(db, OCT, by=None, today=TODAY)
    machines = {m.name: m for m in report.drift.machines}
    # the line 0.5, 0.7, 0.9 a year apart reaches 1.0 about half a year after the last
    # test (2026-09), before the next due date 2027-03-02; the steady one never does
    assert "reaches the claim" in machines["Creeping machine"].warning
    assert machines["Steady machine"].warning == ""
    assert machines["Creeping machine"].due_on == dt.date(2027, 3, 2)
    line = machines["Creeping machine"].line
    assert line is not None and line.slope * 365.25 == pytest.approx(0.2, rel=0.01)


# ------------------------------------------------------------------ periods in progress
def test_a_month_in_progress_is_compared_like_with_like_and_not_judged_early(
    db, hand, client, login_as, monkeypatch
) -> None:  # type: ignore[no-untyped-def]
    nov = Period.month(2026, 11)
    early = measures.shop_report(db, nov, by=None, today=dt.date(2026, 11, 2))
    assert early.previous_period == Period(dt.date(2026, 10, 1), dt.date(2026, 10, 2))
    assert early.previous_label == "October 2026, days 1–2"
    assert {c.verdict for c in early.changes.values()} == {"too early"}
    assert "too early: 2 days" in early.changes["first_pass_rate"].text
    # October's first two days: J3 received 10-01 (J5 received in September)
    assert early.previous.jobs_received == 1
    mid = measures.shop_report(db, nov, by=None, today=TODAY)
    assert mid.previous_period == Period(dt.date(2026, 10, 1), dt.date(2026, 10, 15))
    assert mid.previous.jobs_received == 6  # J1 J2 J3 J4 J6 J7 → received by 10-15
    assert mid.period_label == "November 2026 to date"
    monkeypatch.setattr(routes, "_today", lambda: dt.date(2026, 11, 2))
    login_as("owner")
    pdf = PdfReader(io.BytesIO(client.get("/dashboard/report.pdf?month=2026-11").data))
    text = " ".join(p.extract_text() for p in pdf.pages)
    assert len(pdf.pages) == 2
    assert "to date" in text and "too early" in text
    assert " ".join(text.split()).count("not a verdict on a person") == 1  # once, plainly
    # the document names its definitions itself
    assert "Wilson" in text and "Rework rate: of the jobs that first reached" in text


# ------------------------------------------------------------------ CSV names
def test_csv_speaks_the_trade_by_default_and_machine_names_on_request(
    client, login_as, monkeypatch, hand
) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(routes, "_today", lambda: TODAY)
    login_as("owner")
    base = "/dashboard.csv?table=by_operator&period=month&on=2026-10-01"
    people = list(csv.reader(io.StringIO(client.get(base).get_data(as_text=True))))
    machine = list(csv.reader(io.StringIO(
        client.get(base + "&names=machine").get_data(as_text=True))))
    assert people[1:] == machine[1:] and len(people[0]) == len(machine[0])
    assert "wip_age_median_wd" in machine[0] and "wip_age_median_wd" not in people[0]
    assert "work in progress, median age (working days)" in people[0]
    assert "rework rate, 95 % interval, low" in people[0]
    # the interval cells on the page are the CSV's interval columns
    html = client.get("/dashboard?period=month&on=2026-10-01").get_data(as_text=True)
    rows = {r[machine[0].index("operator_id")]: dict(zip(machine[0], r, strict=True))
            for r in machine[1:]}
    for key, cells in re.findall(r'<tr data-key="(\d+)">(.*?)</tr>', html.split(
            'data-table="by_operator"')[1].split("</table>")[0], re.S):
        shown = dict(re.findall(r'data-interval="(\w+)">(.*?)</td>', cells))
        row = rows[key]
        for name, text in shown.items():
            if row[f"{name}_low95"] == "":
                assert text == "–"
                continue
            low, high = float(row[f"{name}_low95"]), float(row[f"{name}_high95"])
            assert text == f"{low * 100:.0f}–{high * 100:.0f} %", (key, name)
    assert client.get(base + "&names=secret").status_code == 422


# ------------------------------------------------------------------ query count
def test_dashboard_query_count_stays_the_same_with_ten_times_the_data(
    client, login_as, monkeypatch, db, shop, make_user, count_queries
) -> None:  # type: ignore[no-untyped-def]
    """Funnels, p-charts, machine time, drift and proving tests add queries, never per row."""
    monkeypatch.setattr(routes, "_today", lambda: REWORK_TODAY)
    login_as("owner")
    ops = [make_user("operator") for _ in range(3)]
    machines = [shop.machine(), shop.machine()]
    types = [shop.rotor_type() for _ in range(3)]

    def add(n: int, offset: int) -> None:
        for i in range(offset, offset + n):
            rotor = shop.rotor(types[i % 3])
            for visit in range(3):  # three visits each: every rotor is a drift candidate
                received = dt.date(2026, 1, 5) + dt.timedelta(days=(7 * i + 90 * visit) % 330)
                job = measures_shop._plain_job(
                    db, shop, rotor, ops[i % 3], machines[i % 2], received,
                    first_pass=i % 4 != 0, rework_reason="loose" if i % 5 == 0 else None)
                if visit == 2 and i % 7 == 0:
                    shop.job(rotor, kind="return", return_of_job_id=job.id,
                             received_on=received + dt.timedelta(days=10), operator_id=ops[0].id)
            db.add(MachineVerification(machine_id=machines[i % 2].id,
                                       performed_on=dt.date(2025, 1, 1) + dt.timedelta(days=i),
                                       proving_rotor="PR", measured_umar_gmm=0.1 + i / 100,
                                       claimed_umar_gmm=1.0, passed=True))
        db.commit()

    add(3, 0)
    with count_queries() as small:
        assert client.get("/dashboard").status_code == 200
    add(27, 3)
    with count_queries() as large:
        html = client.get("/dashboard").get_data(as_text=True)
    assert 'id="chart-rework_rate-operator"' in html and 'id="chart-pchart-rework_rate"' in html
    assert small.count == large.count, (small.count, large.count)
    assert large.count < 40


def test_the_cost_settings_are_typed_configuration_keys(tmp_path) -> None:  # type: ignore[no-untyped-def]
    from shopapp.core.config import ConfigError, load_config

    cfg = load_config(instance_path=tmp_path, environ={
        "SHOPAPP_MACHINE_HOURLY_RATE": "62.5", "SHOPAPP_MACHINE_IDLE_MINUTES": "20",
        "SHOPAPP_MONEY_UNIT": "EUR"})
    settings = costs.cost_settings(cfg)
    assert (settings.hourly_rate, settings.idle_seconds, settings.money_unit) == (62.5, 1200,
                                                                                  "EUR")
    with pytest.raises(ConfigError, match="is not a number"):
        load_config(instance_path=tmp_path, environ={"SHOPAPP_MACHINE_HOURLY_RATE": "cheap"})
    with pytest.raises(Exception, match="MACHINE_IDLE_MINUTES"):
        costs.cost_settings({"MACHINE_IDLE_MINUTES": 0})
