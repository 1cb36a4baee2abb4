"""Start-up cost of the package and the command line: which heavy modules they load (not a
timing test).

``import specproc`` (with ``dir()`` and its ``__all__``), ``specproc --help`` and each
sub-command's ``--help`` must load none of numpy, scipy, the readers' libraries, matplotlib,
rich or dask; ``specproc info FILE`` loads what reading a file needs and none of the processing
or plotting libraries; ``specproc fit`` of a raw scan loads neither nmrglue, scipy.signal nor
scipy.stats, and tables-only outputs load no matplotlib or Jinja2. Each check runs in a fresh
interpreter, since this test process has imported everything already.
"""

import json
import subprocess
import sys

from specproc._paths import demo_dir

#: Modules whose import costs tenths of a second (measured with python -X importtime).
HEAVY = ("numpy", "scipy", "scipy.signal", "scipy.stats", "scipy.optimize", "nibabel",
         "pydicom", "nmrglue", "matplotlib", "rich", "dask", "jinja2", "threadpoolctl")

#: What reading a NIfTI-MRS file may load (nibabel imports numpy and pydicom).
READING = {"numpy", "scipy", "nibabel", "pydicom"}

_PROBE = """
import json, sys
from specproc.cli import main
for args in json.loads(sys.argv[1]):
    try:
        main(args, prog_name="specproc")
    except SystemExit:
        pass
print(json.dumps(sorted(m for m in {heavy} if m in sys.modules)), file=sys.stderr)
"""


def loaded_after(*commands):
    """Heavy modules loaded after running the commands in turn in one fresh interpreter."""
    proc = subprocess.run(
        [sys.executable, "-c", _PROBE.format(heavy=HEAVY), json.dumps(commands)],
        capture_output=True, text=True, timeout=120,
    )
    return set(json.loads(proc.stderr.strip().splitlines()[-1])), proc.stdout


def test_help_loads_no_heavy_module():
    commands = [["--help"]] + [[name, "--help"] for name in
                               ("fit", "batch", "demo", "basis", "phantom", "info", "config")]
    loaded, out = loaded_after(*commands)
    assert "Commands:" in out and out.count("Usage:") == len(commands)
    assert loaded == set()


def test_info_loads_only_what_reading_needs():
    example = demo_dir() / "example" / "example_svs.nii.gz"
    loaded, out = loaded_after(["info", str(example)])
    assert "points" in out.lower()
    assert loaded <= READING
    assert "numpy" in loaded  # the probe does see what a command imports


_PACKAGE_PROBE = """
import json, sys
import specproc
names = dir(specproc)
assert set(specproc.__all__) <= set(names), "dir() lists every public name"
specproc.SpecprocError, specproc.InvalidInputError
before = sorted(m for m in {heavy} if m in sys.modules)
specproc.Scan  # the first use of a lazy name imports its module
after = sorted(m for m in {heavy} if m in sys.modules)
print(json.dumps([before, after]))
"""


def test_import_specproc_loads_no_heavy_module():
    proc = subprocess.run([sys.executable, "-c", _PACKAGE_PROBE.format(heavy=HEAVY)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    before, after = json.loads(proc.stdout.strip().splitlines()[-1])
    assert before == []
    assert "numpy" in after  # the probe does see what a first use imports
    assert "matplotlib" not in after and "scipy.signal" not in after


#: Loaded only by options that ask for them: nmrglue (ACME phasing, apodization; it imports
#: scipy.signal, which imports scipy.stats), scipy.signal and scipy.stats (their peak finding
#: and line removal are done in numpy: specproc.peaks, specproc.qc.linear_detrended).
NOT_FOR_A_SCAN = {"nmrglue", "scipy.signal", "scipy.stats"}


def _small_inputs(root):
    """A raw 8-transient scan and a 3-member basis file (no simulation needed)."""
    import numpy as np

    from specproc.basis import BasisSet
    from specproc.data import Scan
    from specproc.io import save

    n, dwell, mhz = 512, 1.0 / 1200.0, 123.2
    t = np.arange(n) * dwell
    names, shifts = ("NAA", "Cr", "GPC"), (2.008, 3.027, 3.212)
    fids = np.stack([np.exp(-2j * np.pi * (s - 4.65) * mhz * t) for s in shifts])
    BasisSet(names=names, fids=fids, dwell_s=dwell, spectrometer_mhz=mhz, centre_ppm=4.65,
             kinds=("metabolite",) * 3, sequence="press",
             timings_s={"te_s": 0.03}).save(root / "basis.npz")
    rng = np.random.default_rng(0)
    clean = np.array([10.0, 4.0, 2.0]) @ fids * np.exp(-np.pi * 4 * t)
    raw = np.stack([clean + 0.3 * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
                    for _ in range(8)])
    save(Scan(raw, dwell_s=dwell, spectrometer_mhz=mhz, centre_ppm=4.65, dims=("DIM_DYN",),
              te_s=0.03, sequence="press"), root / "raw.nii.gz")
    return root / "raw.nii.gz", root / "basis.npz"


def test_fit_of_a_scan_loads_no_signal_or_stats_module(tmp_path):
    scan, basis = _small_inputs(tmp_path)
    loaded, out = loaded_after(["fit", str(scan), "--basis", str(basis),
                                "-o", str(tmp_path / "out")])
    assert (tmp_path / "out" / "report.html").exists(), out
    assert not loaded & NOT_FOR_A_SCAN
    assert "matplotlib" in loaded  # the figures were drawn: the probe sees their imports


_TABLES_PROBE = """
import json, sys
from specproc.analysis import analyse_scan, write_scan_outputs
result = analyse_scan(sys.argv[1], basis=sys.argv[2])
write_scan_outputs(result, sys.argv[3], outputs="tables")
print(json.dumps(sorted(m for m in {heavy} if m in sys.modules)))
"""


def test_tables_only_loads_no_plotting_or_templates(tmp_path):
    scan, basis = _small_inputs(tmp_path)
    proc = subprocess.run([sys.executable, "-c", _TABLES_PROBE.format(heavy=HEAVY), str(scan),
                           str(basis), str(tmp_path / "tables")],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    loaded = set(json.loads(proc.stdout.strip().splitlines()[-1]))
    assert (tmp_path / "tables" / "results.tsv").exists()
    assert not loaded & (NOT_FOR_A_SCAN | {"matplotlib", "jinja2"})
    assert "scipy.optimize" in loaded  # the fit ran in the probe
