"""The cohort page of the demo study, as a browser sees it, against the cohort tables.

The summary table is read back from the DOM that headless Chromium builds from
``cohort.html`` and compared with statistics recomputed here from ``cohort.tsv`` with the
standard library's :mod:`statistics` (mean, sample SD, median, quartiles by the inclusive
method, which is linear interpolation between order statistics) under the exclusion rules the
page states: phantom scans (manifest kind) not summarised, flagged scans left out, values with
a CRLB above 20 % (the default ``[qc] crlb_percent_max``) or undefined left out,
macromolecules not summarised.
"""

from __future__ import annotations

import csv
import math
import statistics
from pathlib import Path

import pytest
from _browser import dump_dom, tables

pytestmark = [pytest.mark.slow, pytest.mark.browser]


def _read(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as handle:
        return list(csv.DictReader(handle, delimiter="\t"))


def _phantom_subjects() -> set[str]:
    """Subjects the demo manifest marks as phantoms (listed, not summarised)."""
    from specproc._paths import demo_dir

    rows = _read(demo_dir() / "manifest.tsv")
    return {r["subject"].removeprefix("sub-") for r in rows if r["kind"] == "phantom"}


def _expected(rows: list[dict[str, str]], column: str) -> dict[str, dict[str, float]]:
    out: dict[str, dict[str, float]] = {}
    phantoms = _phantom_subjects()
    assert phantoms == {"phantom"}
    rows = [r for r in rows if r["subject"] not in phantoms]
    names = {r["metabolite"] for r in rows if r["kind"] in ("metabolite", "sum", "edited")}
    for name in names:
        mine = [r for r in rows if r["metabolite"] == name and r[column] != "n/a"]
        if not mine:
            continue
        kept = [float(r[column]) for r in mine if r["scan_status"] == "ok"
                and r["crlb_percent"] != "n/a" and float(r["crlb_percent"]) <= 20.0]
        entry = {"n": len(kept), "left_out": len(mine) - len(kept)}
        if kept:
            entry["mean"] = statistics.fmean(kept)
            entry["median"] = statistics.median(kept)
        if len(kept) > 1:
            entry["sd"] = statistics.stdev(kept)
            q1, _, q3 = statistics.quantiles(kept, n=4, method="inclusive")
            entry["q1"], entry["q3"] = q1, q3
        out[name] = entry
    return out


def _close(shown: str, value: float, digits: int = 3) -> None:
    """``shown`` is ``value`` rounded to ``digits`` significant figures (the page's rule)."""
    if value == 0:
        assert float(shown) == 0
        return
    unit = 10.0 ** (math.floor(math.log10(abs(value))) - digits + 1)
    assert abs(float(shown) - value) <= 0.5 * unit * (1 + 1e-9), (shown, value)


@pytest.fixture(scope="module")
def page(demo_cohort, tmp_path_factory: pytest.TempPathFactory) -> dict[str, list[list[str]]]:
    html = dump_dom(demo_cohort.out / "cohort.html", tmp_path_factory.mktemp("profile"))
    return tables(html)


@pytest.mark.parametrize("table, column", [("summary-conc", "conc_molar_mm"),
                                           ("summary-ratio", "ratio_tcr")])
def test_summary_table_matches_cohort_tsv(page, demo_cohort, table: str, column: str) -> None:
    expected = _expected(_read(demo_cohort.out / "cohort.tsv"), column)
    heading, *body = page[table]
    others = page.get(f"{table}-other", [[]])[1:]
    assert heading == ["metabolite", "n", "mean", "SD", "CV %", "median", "IQR (25–75 %)",
                       "n left out"]
    shown = {row[0]: row for row in [*body, *others]}
    assert set(shown) == set(expected)  # macromolecules are not summarised
    assert [row[0] for row in body][:4] == ["tNAA", "tCr", "tCho", "Glx"]
    for name, entry in expected.items():
        row = shown[name]
        assert int(row[1]) == entry["n"] and int(row[7]) == entry["left_out"], name
        if entry["n"]:
            _close(row[2], entry["mean"])
            _close(row[5], entry["median"])
        if entry["n"] > 1:
            _close(row[3], entry["sd"], 2)
            lo, hi = (v.strip() for v in row[6].split("–"))
            _close(lo, entry["q1"])
            _close(hi, entry["q3"])
            if entry["mean"] != 0 and entry["sd"] > 0:
                _close(row[4], 100 * entry["sd"] / entry["mean"], 2)


def test_flagged_scans_are_listed_in_words_with_links(page, demo_cohort) -> None:
    qc = _read(demo_cohort.out / "cohort_qc.tsv")
    flagged = {r["scan_id"] for r in qc if r["status"] != "ok"}
    assert flagged  # sub-04 drifts more than 5 Hz by design
    rows = page["attention-table"][1:]
    assert {row[0] for row in rows} == flagged
    for row in rows:
        assert "_" not in row[2] and row[2].endswith(".")  # a sentence, not a key
    html = (demo_cohort.out / "cohort.html").read_text("utf-8")
    for key in flagged:
        assert f'href="scans/{key}/report.html"' in html
        assert (demo_cohort.out / "scans" / key / "report.html").is_file()
    for rule in ("Flagged scans", "CRLB is above 20 %", "not summarised"):
        assert rule in html
    assert "<script" not in html


def test_phantom_of_the_manifest_is_fitted_without_macromolecules(demo_cohort) -> None:
    rows = _read(demo_cohort.scan_dir("sub-phantom_ses-01_svs") / "results.tsv")
    kinds = {r["kind"] for r in rows}
    assert "macromolecule" not in kinds and "metabolite" in kinds
    volunteer = _read(demo_cohort.scan_dir("sub-01_ses-01_svs") / "results.tsv")
    assert "macromolecule" in {r["kind"] for r in volunteer}  # tissue: protocol rule
    page = (demo_cohort.out / "cohort.html").read_text("utf-8")
    assert "phantom scan(s) (manifest kind" in page and "are listed below but not" in page
