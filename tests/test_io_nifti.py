"""NIfTI-MRS reading and writing, checked against files made and read with plain nibabel.

Outside sources: the NIfTI-MRS standard (Clarke et al., Magn Reson Med 2022;88:2358-2370:
extension code 44, JSON keys, dims 5-7 tags, pixdim[4] dwell, sign convention) and nibabel
as the reference reader/writer of the NIfTI-1/-2 container.
"""

from __future__ import annotations

import gzip
import importlib.util
import json
import shutil

import nibabel as nib
import numpy as np
import pytest
from _io_builders import peak_ppm, singlet_fid, write_nifti_nibabel

from specproc import InvalidInputError, Scan
from specproc._paths import source_root
from specproc.data import make_step_record, user_value
from specproc.io import load, save
from specproc.io.nifti_mrs import read_nifti_mrs

DWELL = 2.5e-4
MHZ = 123.2


def _meta(**extra):
    meta = {"SpectrometerFrequency": [MHZ], "ResonantNucleus": ["1H"]}
    meta.update(extra)
    return meta


def _rand(shape, dtype=np.complex64, seed=0):
    rng = np.random.default_rng(seed)
    return (rng.normal(size=shape) + 1j * rng.normal(size=shape)).astype(dtype)


# ------------------------------------------------------------------------ reading nibabel files
def test_reads_file_written_directly_with_nibabel(tmp_path):
    # Clarke et al. 2022: dims (x, y, z, t, coil, dyn) with dim_5/dim_6 tags, times in s.
    data = _rand((1, 1, 1, 256, 4, 8))
    meta = _meta(
        dim_5="DIM_COIL",
        dim_6="DIM_DYN",
        dim_6_info="transients",
        dim_6_header={"start": 0, "increment": 1},
        EchoTime=0.035,
        RepetitionTime=2.0,
        MixingTime=0.01,
        SequenceName="svs_PRESS_custom",
        ProtocolName="my protocol",
        WaterSuppressed=True,
        ProcessingApplied=[{"Time": "2026-01-01T00:00:00", "Program": "other", "Version": "1",
                            "Method": "coil combination", "Details": {}}],
        private_site="site 7",
    )
    path = write_nifti_nibabel(tmp_path / "direct.nii.gz", data, dwell=DWELL, meta=meta)
    scan = load(path)
    assert scan.format == "nifti-mrs"
    assert scan.dims == ("DIM_COIL", "DIM_DYN")
    assert scan.data.shape == (4, 8, 256)
    assert scan.data.dtype == np.complex64
    # time moved to the last axis: element [c, d, t] is the file's [0, 0, 0, t, c, d]
    np.testing.assert_array_equal(scan.data, np.moveaxis(data[0, 0, 0], 0, -1))
    assert scan.dwell_s == pytest.approx(DWELL, rel=1e-7)  # pixdim is float32 in NIfTI-1/2
    assert scan.spectrometer_mhz == MHZ
    assert scan.nucleus == "1H"
    assert scan.te_s == 0.035 and scan.tr_s == 2.0 and scan.tm_s == 0.01
    assert scan.sequence == "press"
    assert scan.protocol == "my protocol"
    assert scan.water_suppressed is True
    assert scan.dim_headers["DIM_DYN"] == {"info": "transients",
                                           "header": {"start": 0, "increment": 1}}
    assert dict(scan.header) == meta  # kept verbatim
    assert scan.provenance[0]["Method"] == "coil combination"


@pytest.mark.parametrize(("unit", "pixdim4"), [("sec", 2.5e-4), ("msec", 0.25), ("usec", 250.0)])
def test_dwell_from_pixdim_and_time_unit(tmp_path, unit, pixdim4):
    # NIfTI xyzt_units: seconds, milliseconds or microseconds (NIfTI-1 standard).
    data = _rand((1, 1, 1, 64))
    path = write_nifti_nibabel(tmp_path / "u.nii", data, dwell=pixdim4, meta=_meta(),
                               time_unit=unit)
    assert load(path).dwell_s == pytest.approx(2.5e-4, rel=1e-6)


def test_reads_nifti1(tmp_path):
    data = _rand((1, 1, 1, 128, 3), np.complex128)
    path = write_nifti_nibabel(tmp_path / "n1.nii", data, dwell=DWELL, meta=_meta(), version=1)
    with open(path, "rb") as fh:
        assert fh.read(348)[344:348] == b"n+1\x00"  # NIfTI-1 magic (NIfTI-1 standard)
    scan = load(path)
    assert scan.dims == ("DIM_COIL",)  # default tag of dimension 5
    np.testing.assert_array_equal(scan.data, data[0, 0, 0].T)


def test_default_dimension_tags(tmp_path):
    # Clarke et al. 2022: dims 5, 6, 7 default to DIM_COIL, DIM_DYN, DIM_INDIRECT_0.
    data = _rand((1, 1, 1, 32, 2, 3, 2))
    path = write_nifti_nibabel(tmp_path / "d.nii", data, dwell=DWELL, meta=_meta())
    assert load(path).dims == ("DIM_COIL", "DIM_DYN", "DIM_INDIRECT_0")


def test_content_not_suffix_decides_compression(tmp_path):
    data = _rand((1, 1, 1, 64))
    plain = write_nifti_nibabel(tmp_path / "a.nii", data, dwell=DWELL, meta=_meta())
    fake_gz = tmp_path / "plain_named.nii.gz"
    shutil.copy(plain, fake_gz)
    gz_named_nii = tmp_path / "gz_named.nii"
    gz_named_nii.write_bytes(gzip.compress(plain.read_bytes()))
    for path in (fake_gz, gz_named_nii):
        np.testing.assert_array_equal(load(path).data, data[0, 0, 0, :])


@pytest.mark.parametrize("dtype", [np.complex64, np.complex128])
def test_singlet_lands_at_its_shift(tmp_path, dtype):
    # NIfTI-MRS sign convention (Clarke et al. 2022; Levitt 1997): ppm = 4.65 - f / MHz.
    n = 2048
    fid = singlet_fid(n, DWELL, MHZ, 2.008).astype(dtype)
    path = write_nifti_nibabel(tmp_path / "s.nii.gz", fid.reshape(1, 1, 1, n), dwell=DWELL,
                               meta=_meta())
    scan = load(path)
    resolution = 1 / (n * DWELL) / MHZ
    assert peak_ppm(scan.data, scan.dwell_s, MHZ) == pytest.approx(2.008, abs=resolution)
    ppm_axis = scan.ppm()
    assert ppm_axis[np.argmax(np.abs(scan.spectrum()))] == pytest.approx(2.008, abs=resolution)


# ------------------------------------------------------------------------ writing
def test_written_file_read_by_plain_nibabel(tmp_path):
    data = _rand((16, 512))
    scan = Scan(data, dwell_s=DWELL, spectrometer_mhz=MHZ, dims=("DIM_DYN",), te_s=0.03,
                tr_s=2.0, sequence="press").with_step("apodization", {"lb_hz": 2.0})
    path = tmp_path / "out.nii.gz"
    save(scan, path)
    img = nib.load(str(path))
    assert isinstance(img, nib.Nifti2Image)  # NIfTI-2 preferred by the standard
    assert img.shape == (1, 1, 1, 512, 16)
    assert img.get_data_dtype() == np.complex64
    assert float(img.header["pixdim"][4]) == pytest.approx(DWELL, rel=1e-7)
    assert img.header.get_xyzt_units()[1] == "sec"
    assert img.header["intent_name"].item().startswith(b"mrs_v")
    exts = [e for e in img.header.extensions if e.get_code() == 44]
    assert len(exts) == 1
    content = exts[0].get_content()
    meta = json.loads(content.decode("utf-8") if isinstance(content, bytes) else content)
    assert meta["SpectrometerFrequency"] == [MHZ]
    assert meta["ResonantNucleus"] == ["1H"]
    assert meta["dim_5"] == "DIM_DYN"
    assert meta["EchoTime"] == 0.03 and meta["RepetitionTime"] == 2.0
    assert meta["ProcessingApplied"][-1]["Method"] == "apodization"
    assert meta["ProcessingApplied"][-1]["Program"] == "specproc"
    # nibabel's own array (read as complex, never get_fdata) equals what we wrote
    np.testing.assert_array_equal(np.asanyarray(img.dataobj)[0, 0, 0].T, data)


@pytest.mark.parametrize("dtype", [np.complex64, np.complex128])
@pytest.mark.parametrize("suffix", [".nii", ".nii.gz"])
def test_round_trip_bit_exact(tmp_path, dtype, suffix):
    data = _rand((2, 3, 4, 128), dtype, seed=3)
    scan = Scan(
        data,
        dwell_s=1 / 3000,
        spectrometer_mhz=297.2,
        dims=("DIM_COIL", "DIM_EDIT", "DIM_DYN"),
        centre_ppm=4.7,
        te_s=0.072,
        tr_s=1.5,
        tm_s=0.02,
        sequence="steam",
        protocol="edit test",
        water_suppressed=False,
        dim_headers={"DIM_EDIT": {"info": "on/off", "header": {"EditCondition": ["ON", "OFF",
                                                                                  "ON"]}}},
        header={"private_note": "kept"},
        format="nifti-mrs",
    ).with_step("first", {"a": 1}).with_step("second", {"b": [1, 2]})
    path = tmp_path / f"rt{suffix}"
    save(scan, path)
    back = load(path)
    assert back.data.dtype == dtype
    assert back.data.tobytes() == scan.data.tobytes()  # bit-exact
    for name in ("dims", "centre_ppm", "te_s", "tr_s", "tm_s", "sequence", "protocol",
                 "water_suppressed", "nucleus", "spectrometer_mhz"):
        assert getattr(back, name) == getattr(scan, name), name
    assert back.dwell_s == pytest.approx(scan.dwell_s, rel=1e-7)
    assert dict(back.dim_headers) == dict(scan.dim_headers)
    assert back.provenance == scan.provenance
    # a bare user key is written in the standard's object form, its value kept
    assert back.header["private_note"]["Value"] == "kept"
    assert user_value(back.header, "private_note") == "kept"
    # a second round trip changes nothing
    save(back, tmp_path / f"rt2{suffix}")
    again = load(tmp_path / f"rt2{suffix}")
    assert again.data.tobytes() == back.data.tobytes()
    assert dict(again.header) == dict(back.header)


def test_round_trip_of_nibabel_file_keeps_user_keys(tmp_path):
    data = _rand((1, 1, 1, 64, 2))
    meta = _meta(dim_5="DIM_DYN", private_scanner="x", ExcitationFlipAngle=90)
    src = write_nifti_nibabel(tmp_path / "src.nii", data, dwell=DWELL, meta=meta)
    scan = load(src)
    save(scan.with_step("noop"), tmp_path / "dst.nii")
    back = load(tmp_path / "dst.nii")
    assert back.header["private_scanner"]["Value"] == "x"  # now in the standard object form
    assert back.header["ExcitationFlipAngle"] == 90
    assert [p["Method"] for p in back.provenance] == ["noop"]


def test_after_averaging_the_stale_dimension_keys_go(tmp_path):
    data = _rand((1, 1, 1, 64, 4))
    meta = _meta(dim_5="DIM_DYN", dim_5_info="transients")
    scan = load(write_nifti_nibabel(tmp_path / "src.nii", data, dwell=DWELL, meta=meta))
    mean = scan.drop_axis("DIM_DYN", scan.data.mean(axis=0))
    save(mean, tmp_path / "avg.nii")
    back = load(tmp_path / "avg.nii")
    assert back.dims == () and "dim_5" not in back.header and "dim_5_info" not in back.header


def test_more_than_three_extra_axes_cannot_be_written(tmp_path):
    scan = Scan(_rand((1, 1, 1, 1, 8)), dwell_s=DWELL, spectrometer_mhz=MHZ,
                dims=("DIM_COIL", "DIM_DYN", "DIM_EDIT", "DIM_MEAS"))
    with pytest.raises(InvalidInputError, match="at most 3"):
        save(scan, tmp_path / "x.nii")
    assert list(tmp_path.iterdir()) == []  # nothing written


# ------------------------------------------------------------------------ bad files
@pytest.mark.parametrize(
    ("shape", "meta", "match"),
    [
        ((2, 1, 1, 64), _meta(), "more than one voxel"),
        ((1, 1, 3, 64), _meta(), "more than one voxel"),
        ((1, 1, 1, 64), None, "code 44"),
        ((1, 1, 1, 64), {"ResonantNucleus": ["1H"]}, "missing spectrometer frequency"),
        ((1, 1, 1, 64), {"SpectrometerFrequency": [MHZ]}, "ResonantNucleus"),
        ((1, 1, 1, 64, 2), _meta(dim_5="DIM_SOMETHING"), "unknown dimension tag"),
        ((1, 1, 1, 64, 2), _meta(dim_6="DIM_DYN"), "inconsistent dimension tags"),
        ((1, 1, 1, 64, 2, 2), _meta(dim_5="DIM_DYN", dim_6="DIM_DYN"), "used twice"),
        ((1, 1, 1, 64), _meta(EchoTime="long"), "EchoTime must be a number in seconds"),
        ((1, 1, 1, 64, 3), _meta(dim_5="DIM_EDIT", dim_5_header={"EditCondition": ["ON", "OFF"]}),
         "has 2 values for 3 indices"),
        ((1, 1, 1, 64), _meta(ProcessingApplied="yes"), "ProcessingApplied"),
    ],
)
def test_bad_nifti_mrs(tmp_path, shape, meta, match):
    path = write_nifti_nibabel(tmp_path / "bad.nii", _rand(shape), dwell=DWELL, meta=meta)
    with pytest.raises(InvalidInputError, match=match) as info:
        load(path)
    assert info.value.path == str(path)


def test_bad_samples_and_header_values(tmp_path):
    nan = _rand((1, 1, 1, 64))
    nan[0, 0, 0, 5] = np.nan
    cases = {
        "nan": (nan, DWELL, "sec", "NaN or infinite"),
        "real": (np.ones((1, 1, 1, 64), np.float32), DWELL, "sec", "not complex"),
        "zero dwell": (_rand((1, 1, 1, 64)), 0.0, "sec", "dwell time"),
        "hz unit": (_rand((1, 1, 1, 64)), DWELL, "hz", "not a time"),
    }
    for name, (data, dwell, unit, match) in cases.items():
        path = write_nifti_nibabel(tmp_path / f"{name}.nii", data, dwell=dwell, meta=_meta(),
                                   time_unit=unit)
        with pytest.raises(InvalidInputError, match=match):
            load(path)


def test_truncated_and_invalid_json(tmp_path):
    good = write_nifti_nibabel(tmp_path / "g.nii", _rand((1, 1, 1, 256)), dwell=DWELL,
                               meta=_meta())
    raw = good.read_bytes()
    (tmp_path / "t.nii").write_bytes(raw[: len(raw) - 100])
    with pytest.raises(InvalidInputError, match=r"t\.nii"):
        load(tmp_path / "t.nii")
    (tmp_path / "tgz.nii.gz").write_bytes(gzip.compress(raw)[:300])
    with pytest.raises(InvalidInputError, match="gzip"):
        load(tmp_path / "tgz.nii.gz")
    # NIfTI-2 header: dim[] is int64 from byte 16, so dim[4] (time) sits at bytes 48-56;
    # a header promising 2**40 points must be refused before any memory is allocated
    huge = bytearray(raw)
    huge[48:56] = (2**40).to_bytes(8, "little")
    (tmp_path / "huge.nii").write_bytes(bytes(huge))
    with pytest.raises(InvalidInputError, match="more than the limit"):
        load(tmp_path / "huge.nii")
    img = nib.Nifti2Image(_rand((1, 1, 1, 16)), np.eye(4))
    img.header.extensions.append(nib.nifti1.Nifti1Extension(44, b"{not json"))
    nib.save(img, str(tmp_path / "j.nii"))
    with pytest.raises(InvalidInputError, match="not valid JSON"):
        load(tmp_path / "j.nii")


def test_other_nucleus_reads_but_load_refuses(tmp_path):
    meta = {"SpectrometerFrequency": [51.7], "ResonantNucleus": ["31P"]}
    path = write_nifti_nibabel(tmp_path / "p.nii", _rand((1, 1, 1, 64)), dwell=DWELL, meta=meta)
    assert read_nifti_mrs(path).nucleus == "31P"  # the Scan may hold other nuclei
    with pytest.raises(InvalidInputError, match="nucleus 31P is not supported yet"):
        load(path)


# ------------------------------------------------------------------------ bundled example
def _example_module():
    script = source_root() / "demo_spectra" / "example" / "make_example.py"
    spec = importlib.util.spec_from_file_location("make_example", script)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_bundled_example_is_current_and_plausible():
    path = source_root() / "demo_spectra" / "example" / "example_svs.nii.gz"
    assert path.stat().st_size < 200_000
    scan = load(path)
    assert scan.dims == ("DIM_DYN",) and scan.data.shape == (16, 1024)
    assert scan.data.dtype == np.complex64
    # CODATA via scipy.constants: 1H at 3 T is 127.7 MHz
    assert scan.field_t == pytest.approx(3.0, abs=1e-9)
    assert scan.spectrometer_mhz == pytest.approx(127.73, abs=0.01)
    assert scan.te_s == pytest.approx(0.030) and scan.tr_s == pytest.approx(2.0)
    assert scan.sequence == "press"
    # the file is what the seeded script makes (not stale)
    rebuilt = _example_module().build_example()
    assert rebuilt.data.tobytes() == scan.data.tobytes()
    # the NAA singlet (Govindaraju et al. 2000: 2.008 ppm) is the largest metabolite peak
    mean = scan.data.mean(axis=0)
    ppm = scan.ppm()
    spectrum = np.abs(np.fft.fftshift(np.fft.fft(mean)))
    window = (ppm > 1.8) & (ppm < 3.5)
    assert ppm[window][np.argmax(spectrum[window])] == pytest.approx(2.008, abs=0.05)
    assert make_step_record("x")["Program"] == "specproc"
