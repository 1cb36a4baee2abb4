"""End to end: ``specproc preprocess`` on a synthetic multi-coil, multi-transient NIfTI-MRS scan.

Sources: the output is read back with plain nibabel (reference library) following the NIfTI-MRS
standard (Clarke et al. 2022: header extension code 44 holding JSON with ProcessingApplied);
the peak positions are the trade values NAA 2.008 / Cr 3.027 ppm (Govindaraju et al. 2000).
"""

import json

import nibabel as nib
import numpy as np
import pytest
from click.testing import CliRunner

from specproc.cli import main
from specproc.data import Scan
from specproc.io import save

MHZ, DWELL_S, N, CENTRE = 123.2, 2.5e-4, 1024, 4.65
T = np.arange(N) * DWELL_S
N_COILS, N_TR = 4, 16
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def singlets(peaks):
    return sum(a * np.exp(-2j * np.pi * (d - CENTRE) * MHZ * T - np.pi * lw * T)
               for d, a, lw in peaks)


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    rng = np.random.default_rng(51)
    folder = tmp_path_factory.mktemp("preprocess_cli")
    offset = -0.04
    metab = singlets([(2.008 + offset, 1.0, 5.0), (3.027 + offset, 0.8, 5.0),
                      (3.2 + offset, 0.6, 5.0), (4.65 + offset, 6.0, 6.0)])
    water = singlets([(4.65 + offset, 120.0, 6.0)])
    eddy = 0.5 * np.exp(-T / 0.02)
    sens = rng.uniform(0.3, 1.0, N_COILS) * np.exp(1j * rng.uniform(-np.pi, np.pi, N_COILS))
    drift = np.exp(1j * (2 * np.pi * rng.uniform(-3, 3, (N_TR, 1)) * T
                         + np.radians(rng.uniform(-30, 30, (N_TR, 1)))))

    def noise(shape):
        return 0.08 * (rng.standard_normal(shape) + 1j * rng.standard_normal(shape))

    data = sens[:, None, None] * (metab * np.exp(1j * eddy)) * drift + noise((N_COILS, N_TR, N))
    ref = sens[:, None, None] * (water * np.exp(1j * eddy)) * np.ones((1, 2, 1))
    ref = ref + noise((N_COILS, 2, N))
    kw = {"dwell_s": DWELL_S, "spectrometer_mhz": MHZ, "dims": ("DIM_COIL", "DIM_DYN"),
          "centre_ppm": CENTRE, "te_s": 0.03, "tr_s": 2.0}
    scan_path = folder / "sub-01_svs.nii.gz"
    water_path = folder / "sub-01_mrsref.nii.gz"
    save(Scan(data.astype(np.complex64), **kw), scan_path)
    save(Scan(ref.astype(np.complex64), **kw), water_path)
    return folder, scan_path, water_path


def extension_json(img):
    for ext in img.header.extensions:
        if ext.get_code() == 44:
            content = ext.get_content()
            if isinstance(content, bytes):
                content = content.decode("utf-8")
            return json.loads(content.rstrip("\x00 "))
    raise AssertionError("no NIfTI-MRS header extension (code 44)")


def test_preprocess_writes_nifti_mrs_and_figure(inputs):
    folder, scan_path, water_path = inputs
    out = folder / "out" / "sub-01_proc.nii.gz"
    result = CliRunner().invoke(main, ["preprocess", str(scan_path), "--water", str(water_path),
                                       "-o", str(out)])
    assert result.exit_code == 0, result.output
    img = nib.load(out)  # plain nibabel
    data = np.asanyarray(img.dataobj)
    assert np.iscomplexobj(data) and data.shape == (1, 1, 1, N)
    to_s = {"sec": 1.0, "msec": 1e-3, "usec": 1e-6}[img.header.get_xyzt_units()[1]]
    assert img.header.get_zooms()[3] * to_s == pytest.approx(DWELL_S, rel=1e-6)
    meta = extension_json(img)
    methods = [entry["Method"] for entry in meta["ProcessingApplied"]]
    for step in ("coil combination", "frequency and phase drift correction",
                 "outlier transient rejection", "averaging", "eddy-current correction",
                 "residual water removal", "frequency referencing", "phase correction"):
        assert step in methods
    for entry in meta["ProcessingApplied"]:
        assert entry["Program"] == "specproc" and "Details" in entry
    # the referenced NAA peak of the written FID is at 2.008 ppm within 0.005 ppm
    fid = data.reshape(N)
    n = 16 * N
    spectrum = np.abs(np.fft.fftshift(np.fft.fft(fid, n)))
    ppm = CENTRE - np.fft.fftshift(np.fft.fftfreq(n, DWELL_S)) / MHZ
    window = np.abs(ppm - 2.008) < 0.1
    assert ppm[window][np.argmax(spectrum[window])] == pytest.approx(2.008, abs=0.005)
    figure = folder / "out" / "sub-01_proc_preprocess.png"
    assert figure.read_bytes()[:8] == PNG_SIGNATURE
    water_out = folder / "out" / "sub-01_proc_water.nii.gz"
    assert np.asanyarray(nib.load(water_out).dataobj).shape == (1, 1, 1, N)
    leftovers = [p.name for p in (folder / "out").iterdir() if p.name.startswith(".")]
    assert leftovers == []


def test_bad_inputs_give_one_line_and_no_output(inputs, tmp_path):
    folder, scan_path, _ = inputs
    short = folder / "short_ref.nii.gz"
    save(Scan(np.ones((N_COILS, 2, 512), complex), dwell_s=DWELL_S, spectrometer_mhz=MHZ,
              dims=("DIM_COIL", "DIM_DYN")), short)
    bad_config = tmp_path / "bad.toml"
    bad_config.write_text("[preprocess.phasing]\nmethod = 'guess'\n")
    cases = [
        ["--water", str(short)],
        ["--config", str(bad_config)],
        ["--water", str(tmp_path / "missing.nii.gz")],
    ]
    for extra in cases:
        out = tmp_path / "res.nii.gz"
        result = CliRunner().invoke(main, ["preprocess", str(scan_path), *extra, "-o", str(out)])
        assert result.exit_code == 2, result.output
        lines = result.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("specproc: error: "), result.output
        assert not out.exists()
        assert not (tmp_path / "res_preprocess.png").exists()
    result = CliRunner().invoke(main, ["preprocess", str(scan_path), "-o",
                                       str(tmp_path / "res.txt")])
    assert result.exit_code == 2 and ".nii" in result.output
