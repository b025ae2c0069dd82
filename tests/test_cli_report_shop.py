"""``shopapp report shop``: JSON keyed by the measure names, the two-page PDF, errors.

Figures are the hand counts of tests/measures_shop.py.
"""

from __future__ import annotations

import json

from pypdf import PdfReader

from tests import measures_shop

MEASURES = ("jobs_received", "jobs_dispatched", "wip_jobs", "wip_age_median_wd",
            "wip_age_max_wd", "turnaround_median_wd", "turnaround_p90_wd", "promised_hit_rate",
            "reached_in_tolerance", "first_pass_rate", "correction_cycles_mean", "reworked_jobs",
            "rework_rate", "rework_reasons", "rejected_jobs", "rejection_reasons",
            "rotors_getting_worse", "machine_utilisation", "machine_verification", "by",
            "trend", "previous", "changes", "funnels", "funnel_flags", "control_charts",
            "rework_cost", "drift", "definitions", "caution", "rejection_rate")


def test_json_prints_the_months_figures(runner, db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    measures_shop.build(db, shop, make_user)
    result = runner.invoke(args=["report", "shop", "--month", "2026-10", "--json",
                                 "--as-of", "2026-11-15"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert set(MEASURES) <= set(data)
    assert data["jobs_received"] == 11  # J1–J4, J6–J12
    # Every rate is an object since issue 17 (was a bare fraction): value, counts, interval.
    # Rework: 2 of the 6 that reached tolerance came back within 90 days (J4, J10).
    assert {k: data["rework_rate"][k] for k in ("value", "numerator", "denominator")} == {
        "value": 2 / 6, "numerator": 2, "denominator": 6}
    assert {k: data["first_pass_rate"][k] for k in ("value", "numerator", "denominator")} == {
        "value": 0.8, "numerator": 4, "denominator": 5}  # 4 of 5 judged
    assert len(data["first_pass_rate"]["interval_95"]) == 2
    assert data["by"]["operator"][0]["rework_rate"]["denominator"] == 3
    assert data["turnaround_median_wd"] == 3.0
    assert data["previous"]["jobs_received"] == 1  # J5 in September
    assert [r["reason"] for r in data["rejection_reasons"]] == ["cracked hub",
                                                                "over machine capacity"]
    status = {m["machine"]: m["status"] for m in data["machine_verification"]}
    assert status["Hand shop M1"] == "due soon"  # due 2026-11-20, as of 2026-11-15


def test_pdf_has_two_pages(runner, db, shop, make_user, tmp_path) -> None:  # type: ignore[no-untyped-def]
    measures_shop.build(db, shop, make_user)
    out = tmp_path / "oct.pdf"
    result = runner.invoke(args=["report", "shop", "--month", "2026-10", "--output", str(out)])
    assert result.exit_code == 0, result.output
    assert "wrote" in result.output
    reader = PdfReader(out)
    assert len(reader.pages) == 2
    text = reader.pages[0].extract_text()
    assert "October 2026" in text and "First-pass rate" in text


def test_bad_month_and_missing_output_are_one_line_errors(runner) -> None:  # type: ignore[no-untyped-def]
    bad = runner.invoke(args=["report", "shop", "--month", "Oct", "--json"])
    assert bad.exit_code != 0 and "YYYY-MM" in bad.output and "Traceback" not in bad.output
    neither = runner.invoke(args=["report", "shop", "--month", "2026-10"])
    assert neither.exit_code != 0 and "--output" in neither.output
