"""The per-scan report folder: results.tsv, fit.json, config.toml, fit.png/pdf, report.html.

One scan (the demo phantom, with a header rewritten to hold markup and script) is processed
once for the module with a small basis. Checks:

* the HTML parses with the standard library's :mod:`html.parser`, holds every figure written
  beside it (the embedded base64 PNG decodes to the same bytes) and every row of results.tsv,
  has no script element and no external asset;
* header strings with markup and ``<script>`` show as text (escaped by :func:`html.escape`);
* the PDF opens: the ``%PDF-`` header and ``%%EOF`` trailer of the PDF format (ISO 32000) and
  at least one ``/Type /Page`` object;
* the report renders in a real browser: headless Chromium takes a screenshot, which must not
  be blank (pixel variance); skipped only where Chromium is not installed.
"""

from __future__ import annotations

import base64
import json
import shutil
import subprocess
import tomllib
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from specproc._paths import demo_dir
from specproc.analysis import analyse_scan, write_scan_outputs
from specproc.basis import simulate_basis
from specproc.config import load_config
from specproc.errors import InvalidInputError
from specproc.io import load, save
from specproc.report.html import escape
from specproc.report.tables import config_to_toml

EVIL_PROTOCOL = '<b>bold</b><script>alert("protocol")</script> & more'
EVIL_LOCATION = "<img src=x onerror=alert(1)>"
EVIL_NOTE = "</td></tr></table><script>document.body.innerHTML=''</script>"
#: A scan label with markup, quotes and broken matplotlib mathtext ($\frac$ has no arguments).
EVIL_TITLE = "phantom <check> & 'quotes' $\\frac$"
PHANTOM = demo_dir() / "sub-phantom" / "ses-01" / "mrs"


class _Collector(HTMLParser):
    """Collects tags, text, images, links and table rows of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[str] = []
        self.text: list[str] = []
        self.images: list[str] = []
        self.links: list[str] = []
        self.rows: list[list[str]] = []
        self._row: list[str] | None = None
        self._cell: list[str] | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        a = dict(attrs)
        if tag == "img":
            self.images.append(a.get("src") or "")
        if tag == "a":
            self.links.append(a.get("href") or "")
        if tag == "tr":
            self._row = []
        if tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag: str) -> None:
        if tag in ("td", "th") and self._row is not None and self._cell is not None:
            self._row.append("".join(self._cell))
            self._cell = None
        if tag == "tr" and self._row is not None:
            self.rows.append(self._row)
            self._row = None

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self._cell is not None:
            self._cell.append(data)


@pytest.fixture(scope="module")
def report_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Process the tampered phantom once; return its output folder."""
    root = tmp_path_factory.mktemp("report")
    scan = load(PHANTOM / "sub-phantom_ses-01_svs.nii.gz")
    water = load(PHANTOM / "sub-phantom_ses-01_mrsref.nii.gz")
    header = dict(scan.header) | {
        "specproc_voxel_region": {"Value": EVIL_LOCATION, "Description": "region"},
        "Comment": EVIL_NOTE}
    save(scan.replace(protocol=EVIL_PROTOCOL, header=header), root / "evil_svs.nii.gz")
    save(water, root / "evil_mrsref.nii.gz")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SPECPROC_CACHE_DIR", str(root / "cache"))
        basis = simulate_basis(
            sequence="press", field_t=3.0, te_s=0.030, dwell_s=scan.dwell_s,
            n_points=scan.n_points, metabolites=["NAA", "Cr", "PCr", "PCh", "GPC", "mI", "Glu",
                                                  "Gln", "Lac"],
        )
    result = analyse_scan(root / "evil_svs.nii.gz", root / "evil_mrsref.nii.gz", basis=basis,
                          title=EVIL_TITLE)
    write_scan_outputs(result, root / "out")
    return root / "out"


@pytest.fixture(scope="module")
def page(report_dir: Path) -> tuple[str, _Collector]:
    text = (report_dir / "report.html").read_text(encoding="utf-8")
    parser = _Collector()
    parser.feed(text)
    parser.close()
    return text, parser


def test_every_output_file_is_written(report_dir: Path) -> None:
    for name in ("results.tsv", "fit.json", "config.toml", "fit.png", "fit.pdf", "report.html"):
        assert (report_dir / name).is_file(), name
    leftovers = [p.name for p in report_dir.iterdir() if p.name.startswith(".")]
    assert leftovers == []  # no temporary files of the atomic writes


def test_html_parses_and_contains_every_results_row(page: tuple[str, _Collector],
                                                    report_dir: Path) -> None:
    _, parser = page
    lines = (report_dir / "results.tsv").read_text(encoding="utf-8").splitlines()
    header = lines[0].split("\t")
    names = [line.split("\t")[header.index("metabolite")] for line in lines[1:]]
    assert names and "tCr" in names
    heading = next(row for row in parser.rows if row and row[0] == "metabolite")
    start = parser.rows.index(heading)
    table = [row for row in parser.rows[start + 1:start + 1 + len(names)]]
    shown = {row[0].split()[0]: row for row in table}  # the name, then its long name
    assert set(shown) == set(names)
    # each results row appears with its amplitude as in results.tsv (3 significant figures)
    col = heading.index("amplitude (a.u.)")
    for line in lines[1:]:
        cells = line.split("\t")
        name = cells[header.index("metabolite")]
        assert float(shown[name][col]) == pytest.approx(
            float(cells[header.index("amplitude")]), rel=5e-3)


def test_html_embeds_every_figure(page: tuple[str, _Collector], report_dir: Path) -> None:
    _, parser = page
    outputs = json.loads((report_dir / "fit.json").read_text(encoding="utf-8"))["outputs"]
    pngs = [report_dir / outputs[k] for k in ("figure_png", "preprocess_png") if k in outputs]
    assert len(pngs) >= 1
    embedded = []
    for src in parser.images:
        assert src.startswith("data:image/png;base64,")
        embedded.append(base64.b64decode(src.split(",", 1)[1]))
    assert len(embedded) == len(pngs)
    for path in pngs:
        assert path.read_bytes() in embedded, path.name


def test_html_is_self_contained(page: tuple[str, _Collector], report_dir: Path) -> None:
    text, parser = page
    assert "script" not in parser.tags
    assert "link" not in parser.tags  # no external style sheet
    for href in parser.links:
        if href.startswith("file://"):
            assert href.endswith("docs/methods.md")
        else:
            assert "://" not in href and (report_dir / href).is_file(), href
    assert "http://" not in text and "https://" not in text


def test_header_markup_and_script_show_as_text(page: tuple[str, _Collector]) -> None:
    text, parser = page
    visible = "".join(parser.text)
    for evil in (EVIL_PROTOCOL, EVIL_LOCATION, EVIL_NOTE, EVIL_TITLE):
        assert evil in visible, evil
    assert "<script" not in text.lower()
    assert "<img src=x" not in text
    # quotes as a named or a numeric character reference (both are HTML's escapes)
    assert ("&lt;script&gt;alert(&quot;protocol&quot;)&lt;/script&gt;" in text
            or "&lt;script&gt;alert(&#34;protocol&#34;)&lt;/script&gt;" in text)


def test_report_has_caution_methods_versions_and_settings(page: tuple[str, _Collector]) -> None:
    _, parser = page
    visible = "".join(parser.text)
    for needle in ("research use only", "not a medical device", "qualified professionals"):
        assert needle in visible.lower()
    for section in ("1 Hardware", "2 Acquisition", "3 Analysis", "4 Data quality"):
        assert section in visible
    assert "Lin et al., NMR Biomed 2021;34:e4484" in visible
    assert "specproc" in visible and "numpy" in visible
    assert {"fit.json", "config.toml"} <= set(parser.links)


def test_pdf_opens(report_dir: Path) -> None:
    data = (report_dir / "fit.pdf").read_bytes()
    assert data.startswith(b"%PDF-")  # PDF header (ISO 32000-1, 7.5.2)
    assert data.rstrip().endswith(b"%%EOF")  # file trailer (7.5.5)
    pages = data.count(b"/Type /Page") - data.count(b"/Type /Pages")
    assert pages >= 1


def test_results_tsv_and_json_agree(report_dir: Path) -> None:
    doc = json.loads((report_dir / "fit.json").read_text(encoding="utf-8"))
    lines = (report_dir / "results.tsv").read_text(encoding="utf-8").splitlines()
    header = lines[0].split("\t")
    rows = {r[header.index("metabolite")]: r for r in (line.split("\t") for line in lines[1:])}
    ratio = float(rows["NAA"][header.index("ratio_tcr")])
    assert ratio == pytest.approx(doc["quantification"]["ratios"]["NAA"], rel=1e-5)
    # phantom without tissue fractions: ratios only, said plainly
    assert doc["quantification"]["water_referenced"] is False
    assert rows["NAA"][header.index("conc_molar_mm")] == "n/a"
    assert doc["versions"]["specproc"]
    assert doc["inputs"]["scan"]["sha256"]
    assert doc["quantification"]["formula"]["ratio"]
    assert "snr" in doc["qc"] and "flags" in doc["qc"]


def test_config_toml_reproduces_the_settings(report_dir: Path) -> None:
    path = report_dir / "config.toml"
    assert tomllib.loads(path.read_text(encoding="utf-8")) == load_config(None)
    assert load_config(path) == load_config(None)  # reusable with --config


def test_config_to_toml_round_trip_of_awkward_values() -> None:
    config = {"a": {"text": 'quote " back\\slash\nnew line\ttab', "n": 3, "x": 0.1,
                    "flag": False, "list": [[1.0, 2.0], [3, 4]],
                    "groups": [{"name": "g", "members": ["*"]}]},
              "top": "value", "b": {"c": {"d": 1}}}
    assert tomllib.loads(config_to_toml(config, header="line one\nline two")) == config


def test_escape_escapes_markup() -> None:
    # the five characters html.escape(quote=True) replaces (Python standard library docs)
    assert escape('<a href="x">Tom & \'Jerry\'</a>') == (
        "&lt;a href=&quot;x&quot;&gt;Tom &amp; &#x27;Jerry&#x27;&lt;/a&gt;"
    )
    assert escape(None) == ""


def test_bad_tissue_fractions_are_rejected_before_any_output(tmp_path: Path) -> None:
    with pytest.raises(InvalidInputError, match="sum"):
        analyse_scan(PHANTOM / "sub-phantom_ses-01_svs.nii.gz",
                     tissue={"gm": 0.7, "wm": 0.7, "csf": 0.1})
    assert not (tmp_path / "o").exists()


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "/usr/bin/chromium"):
        found = shutil.which(name)
        if found:
            return found
    return None


def test_report_renders_in_headless_chromium(report_dir: Path, tmp_path: Path) -> None:
    browser = _chromium()
    if browser is None:
        pytest.skip("Chromium is not installed (Debian package 'chromium'); "
                    "the browser rendering check needs it")
    shot = tmp_path / "shot.png"
    command = [
        browser, "--headless", "--no-sandbox", "--disable-gpu",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--no-first-run", f"--user-data-dir={tmp_path / 'profile'}",
        f"--screenshot={shot}", "--window-size=1200,1600",
        (report_dir / "report.html").resolve().as_uri(),
    ]
    done = subprocess.run(command, capture_output=True, timeout=120, check=False)
    assert shot.is_file(), done.stderr.decode("utf-8", "replace")[-2000:]
    import matplotlib.image

    pixels = matplotlib.image.imread(shot)
    assert pixels.shape[0] >= 1000 and pixels.shape[1] >= 1000
    grey = pixels[..., :3].mean(axis=-1)
    assert float(np.var(grey)) > 1e-3  # a blank page has zero variance
    # the page is mostly light with dark text: both must be present
    assert float((grey < 0.3).mean()) > 0.001 and float((grey > 0.9).mean()) > 0.3


@pytest.mark.slow
def test_demo_reports_state_the_caution_and_the_basis_protocol(demo_cohort) -> None:
    """The reports of the session's demo run (shared fixture, tests/conftest.py): every scan's
    page carries the caution and the basis sub-timing with its source (the demo files give no
    TE1, so the symmetric PRESS assumption is stated), and its fit.json records the same."""
    scans = sorted((demo_cohort.out / "scans").iterdir())
    assert len(scans) == 6  # four volunteers, the edited scan and the phantom
    for folder in scans:
        page = (folder / "report.html").read_text(encoding="utf-8")
        assert "not a medical device" in page
        doc = json.loads((folder / "fit.json").read_text(encoding="utf-8"))
        if doc.get("edited"):  # the MEGA-PRESS scan's header gives its TE1 (15 ms)
            assert "TE1 15 ms, TE2 53 ms (header)" in page
            assert doc["protocol"]["timing_sources"] == {"te1_s": "header"}
            continue
        assert "assumed: TE1 = TE/2" in page
        assert doc["protocol"]["timing_sources"] == {"te1_s": "assumed: TE1 = TE/2"}
        assert doc["protocol"]["te1_s"] == pytest.approx(doc["protocol"]["te_s"] / 2)
    cohort = (demo_cohort.out / "cohort.html").read_text(encoding="utf-8")
    assert "not a medical device" in cohort
