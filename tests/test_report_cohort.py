"""The cohort page's rules on hand-made scan summaries (no processing).

Statistics checked against the standard library's :mod:`statistics` (mean, sample SD,
median); the page's text against the rules it must state.
"""

from __future__ import annotations

import statistics

import pytest

from specproc.report.cohort import CohortPage, summary_statistics


def _summary(conc: float, crlb: float, *, flags=(), status="ok", mm=2.0) -> dict:
    return {
        "status": status, "qc": {"snr": 50.0, "naa_fwhm_hz": 6.0, "drift_range_hz": 7.5},
        "flags": list(flags),
        "metabolites": [
            {"metabolite": "NAA", "kind": "metabolite", "conc_molar_mm": conc,
             "ratio_tcr": conc / 8.0, "crlb_percent": crlb},
            {"metabolite": "MM0.94", "kind": "macromolecule", "conc_molar_mm": None,
             "ratio_tcr": mm, "crlb_percent": 10.0},
        ],
        "spectrum": {"ppm": [4.0, 3.0, 2.0, 1.0], "fit": [0.0, 1.0, conc, 0.5]},
    }


def _page(exclude_flagged: bool) -> CohortPage:
    page = CohortPage("<b>study</b>", {"crlb_percent_max": 20.0,
                                       "exclude_flagged": exclude_flagged})
    page.add("s1", _summary(10.0, 5.0), report_href="scans/s1/report.html")
    page.add("s2", _summary(12.0, 6.0), report_href="scans/s2/report.html")
    page.add("s3", _summary(30.0, 45.0), report_href="scans/s3/report.html")  # CRLB too high
    page.add("s4", _summary(11.0, 4.0, flags=["drift_range_hz"], status="flagged"),
             report_href="scans/s4/report.html")
    page.add("s5", {"status": "failed", "reason": "the file is empty"}, report_href=None)
    page.add("ph", _summary(99.0, 1.0), report_href="scans/ph/report.html", phantom=True)
    return page


def test_exclusion_rules_of_the_summary() -> None:
    strict = {r["name"]: r for r in _page(True).summary_rows("conc")}
    assert set(strict) == {"NAA"}  # macromolecules are not summarised
    assert strict["NAA"]["_stats"]["n"] == 2 and strict["NAA"]["_excluded"] == 2
    assert strict["NAA"]["_stats"]["mean"] == pytest.approx(statistics.fmean([10.0, 12.0]))
    kept = {r["name"]: r for r in _page(False).summary_rows("conc")}["NAA"]
    assert kept["_stats"]["n"] == 3 and kept["_excluded"] == 1
    assert kept["_stats"]["sd"] == pytest.approx(statistics.stdev([10.0, 12.0, 11.0]))
    assert kept["_stats"]["median"] == pytest.approx(statistics.median([10.0, 12.0, 11.0]))


def test_page_states_rules_lists_reasons_and_escapes() -> None:
    html = _page(True).render(version="0", n_scans=6)
    assert "&lt;b&gt;study&lt;/b&gt;" in html and "<b>study</b>" not in html
    assert "The frequency drifted by 7.50 Hz during the scan" in html
    assert "the file is empty" in html
    assert 'href="scans/s4/report.html"' in html and 'href="scans/s5' not in html
    assert "1 phantom scan(s)" in html and "CRLB is above 20 %" in html
    assert "<title>s1: 10.0 mM</title>" in html  # each point names its scan
    assert "mean of the fitted spectra" in html.lower() and "<script" not in html


def test_summary_statistics_of_few_values() -> None:
    assert summary_statistics([])["n"] == 0
    one = summary_statistics([3.0, float("nan")])
    assert one["n"] == 1 and one["mean"] == 3.0 and one["sd"] != one["sd"]  # NaN SD
