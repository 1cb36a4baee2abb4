"""Test-session settings shared by every test module."""

import os

# On a small shared machine, BLAS thread pools fighting over the cores make SVDs many times
# slower; the tests are single-threaded by design. Must be set before numpy is imported.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")


import dataclasses  # noqa: E402
from pathlib import Path  # noqa: E402

import pytest  # noqa: E402


@dataclasses.dataclass(frozen=True)
class DemoRun:
    """One run of ``specproc demo --workers 2`` (a batch over the bundled demo manifest)."""

    output: str
    out: Path
    cache: Path

    def scan_dir(self, key: str) -> Path:
        """Folder of one scan, by its cohort scan_id (e.g. ``sub-01_ses-01_svs``)."""
        return self.out / "scans" / key


@pytest.fixture(scope="session")
def demo_cohort(tmp_path_factory: pytest.TempPathFactory) -> DemoRun:
    """The demo study processed once per test session, shared by the demo, batch and report
    tests (with its basis cache in a temporary folder)."""
    from click.testing import CliRunner

    from specproc.cli import main

    out = tmp_path_factory.mktemp("demo") / "out"
    cache = tmp_path_factory.mktemp("demo-cache")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SPECPROC_CACHE_DIR", str(cache))
        result = CliRunner().invoke(main, ["demo", "-o", str(out), "--workers", "2"],
                                    catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return DemoRun(result.output, out, cache)
