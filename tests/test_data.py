"""The Scan data model: immutability, time/ppm axes, provenance, checks of bad values.

Outside sources: the NIfTI-MRS sign convention (Clarke et al., Magn Reson Med 2022;
88:2358-2370): with numpy's S = fftshift(fft(fid)) and f = fftshift(fftfreq(n, dwell)),
ppm = centre - f / MHz; numpy's FFT is the reference for the spectrum.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from _io_builders import singlet_fid

from specproc import InvalidInputError, Scan
from specproc.data import is_valid_dim_tag

DWELL, MHZ = 2.5e-4, 123.2


def _scan(**kw):
    data = kw.pop("data", np.ones((4, 64), complex))
    kw.setdefault("dims", ("DIM_DYN",))
    return Scan(data, dwell_s=DWELL, spectrometer_mhz=MHZ, **kw)


def test_scan_is_immutable():
    source = np.ones((4, 64), complex)
    scan = _scan(data=source)
    with pytest.raises(ValueError, match="read-only"):
        scan.data[0, 0] = 5
    with pytest.raises(dataclasses.FrozenInstanceError):
        scan.dwell_s = 1.0
    source[0, 0] = 7  # the caller's array cannot change the Scan
    assert scan.data[0, 0] == 1


def test_real_data_become_complex_and_complex_dtypes_are_kept():
    assert _scan(data=np.ones((4, 8))).data.dtype == np.complex128
    assert _scan(data=np.ones((4, 8), np.complex64)).data.dtype == np.complex64


def test_time_and_frequency_axes():
    scan = _scan(data=np.ones(100, complex), dims=())
    np.testing.assert_allclose(scan.time_s(), np.arange(100) * DWELL)
    assert scan.spectral_width_hz == pytest.approx(4000.0)
    freq = scan.freq_hz()
    np.testing.assert_allclose(freq, np.fft.fftshift(np.fft.fftfreq(100, DWELL)))
    ppm = scan.ppm()
    assert np.all(np.diff(ppm) < 0)  # high ppm on the left
    assert ppm[50] == pytest.approx(4.65)  # zero frequency sits at the centre
    assert scan.replace(centre_ppm=4.7).ppm()[50] == pytest.approx(4.7)
    assert len(scan.ppm(256)) == 256


@pytest.mark.parametrize("shift", [0.9, 2.008, 3.027, 3.2, 4.65, 6.0])
def test_singlet_lands_at_its_ppm(shift):
    n = 2048
    scan = Scan(singlet_fid(n, DWELL, MHZ, shift), dwell_s=DWELL, spectrometer_mhz=MHZ)
    spectrum = scan.spectrum()
    np.testing.assert_allclose(spectrum, np.fft.fftshift(np.fft.fft(scan.data)))
    peak = scan.ppm()[np.argmax(np.abs(spectrum))]
    assert peak == pytest.approx(shift, abs=1 / (n * DWELL) / MHZ)


def test_field_and_shape_helpers():
    scan = _scan(data=np.ones((2, 3, 16), complex), dims=("DIM_COIL", "DIM_DYN"))
    assert scan.field_t == pytest.approx(2.894, abs=1e-3)
    assert scan.extra_shape == {"DIM_COIL": 2, "DIM_DYN": 3}
    assert scan.axis_of("DIM_DYN") == 1 and scan.axis_of("DIM_EDIT") is None
    assert scan.n_points == 16
    reduced = scan.drop_axis("DIM_COIL", scan.data.sum(axis=0))
    assert reduced.dims == ("DIM_DYN",) and reduced.data.shape == (3, 16)
    assert scan.summary()["dims"] == [{"tag": "DIM_COIL", "size": 2}, {"tag": "DIM_DYN",
                                                                       "size": 3}]


def test_with_step_and_replace_leave_the_original():
    scan = _scan()
    step = scan.with_step("apodization", {"lb_hz": 2.0}, data=scan.data * 2)
    assert scan.provenance == () and np.all(scan.data == 1)
    assert len(step.provenance) == 1
    record = step.provenance[0]
    assert record["Method"] == "apodization" and record["Details"] == {"lb_hz": 2.0}
    assert set(record) == {"Time", "Program", "Version", "Method", "Details"}  # NIfTI-MRS
    again = step.with_step("second")
    assert [r["Method"] for r in again.provenance] == ["apodization", "second"]
    other = scan.replace(te_s=0.03)
    assert other.te_s == 0.03 and scan.te_s is None


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"data": np.ones((4, 0), complex)}, "no time-domain samples"),
        ({"data": np.array([1, np.nan, 2], complex), "dims": ()}, "NaN"),
        ({"data": np.array([1, np.inf], complex), "dims": ()}, "NaN"),
        ({"dims": ()}, "dimension tags"),
        ({"dims": ("DIM_FOO",)}, "unknown dimension tag"),
        ({"data": np.ones((2, 2, 8)), "dims": ("DIM_DYN", "DIM_DYN")}, "repeated"),
        ({"te_s": -1.0}, "non-negative"),
    ],
)
def test_bad_scans(kwargs, match):
    with pytest.raises(InvalidInputError, match=match):
        _scan(**kwargs)
    with pytest.raises(InvalidInputError, match="spectrometer frequency"):
        Scan(np.ones(8, complex), dwell_s=DWELL, spectrometer_mhz=None)
    with pytest.raises(InvalidInputError, match="dwell time"):
        Scan(np.ones(8, complex), dwell_s=0.0, spectrometer_mhz=MHZ)


def test_dimension_tags():
    # NIfTI-MRS tag list (Clarke et al. 2022), numbered tags by prefix
    for tag in ("DIM_COIL", "DIM_DYN", "DIM_EDIT", "DIM_INDIRECT_5", "DIM_USER_12", "DIM_ISIS"):
        assert is_valid_dim_tag(tag)
    for tag in ("DIM_USER_", "DIM_INDIRECT_x", "coil", "DIM_TIME"):
        assert not is_valid_dim_tag(tag)
