"""Start-up cost of the package and the command line: which heavy modules they load (not a
timing test).

``import specproc`` (with ``dir()`` and its ``__all__``), ``specproc --help`` and each
sub-command's ``--help`` must load none of numpy, scipy, the readers' libraries, matplotlib,
rich or dask; ``specproc info FILE`` loads what reading a file needs and none of the processing
or plotting libraries. Each check runs in a fresh interpreter, since this test process has
imported everything already.
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
