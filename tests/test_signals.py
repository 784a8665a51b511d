"""Load signals, frame times, frequency and reference phase, and precomputed maps.

The frequency and phase checks use the Cramer-Rao bound of [RifeBoorstyn1974] / [Kay1993] and
SciPy (periodogram, curve_fit) as references (keys of docs/references.md); the file tests are
plumbing and say so.
"""

import math

import numpy as np
import pytest

from fusion.errors import InputError
from fusion.io import LoadSignal, read_frame_times, read_load_signal, read_thermal_maps
from fusion.thermal import LoadReference, estimate_frequency, load_reference


def write_csv(path, header, rows, *, sep=",", comment=None):
    lines = ([comment] if comment else []) + [sep.join(header)]
    lines += [sep.join("" if v is None else repr(float(v)) for v in r) for r in rows]
    path.write_text("\n".join(lines) + "\n")
    return path


# ----------------------------------------------------------------------------- load files
def test_read_load_signal_columns_by_name_any_separator(tmp_path):
    # not a physics check: reading a load file
    t = np.arange(50) / 200.0
    load = 3.0 + np.cos(2 * np.pi * 8.0 * t)
    for sep in (",", ";", "\t"):
        p = write_csv(tmp_path / "load.csv", ["Time", "Force_kN", "load"], zip(t, load, -load), sep=sep,
                      comment="# rig export")
        sig = read_load_signal(p, load_column="force_kn")
        assert isinstance(sig, LoadSignal) and len(sig) == 50
        assert sig.times.dtype == np.float64 and sig.load.dtype == np.float64
        np.testing.assert_array_equal(sig.times, t)          # repr() round-trips floats exactly
        np.testing.assert_array_equal(sig.load, load)
    np.testing.assert_allclose(sig.at([0.01, 0.0125]), np.interp([0.01, 0.0125], t, load))
    with pytest.raises(InputError, match="load signal covers"):
        sig.at([1.0])


def test_frame_column_gives_frame_times(tmp_path):
    # not a physics check: frame times from a trigger column
    t = np.arange(40) / 400.0                      # load at 400 Hz, a frame trigger every 4th row
    rows = [(ti, math.sin(ti), (i // 4 if i % 4 == 0 else None)) for i, ti in enumerate(t)]
    p = write_csv(tmp_path / "l.csv", ["time", "load", "frame"], rows)
    sig = read_load_signal(p, frame_column="frame")
    np.testing.assert_array_equal(sig.frame_times(10), t[::4])
    with pytest.raises(InputError, match=r"frame column must number the frames 0\.\.10"):
        sig.frame_times(11)
    plain = read_load_signal(p)
    np.testing.assert_array_equal(plain.frame_times(40), t)
    with pytest.raises(InputError, match="has 40 rows and no frame column"):
        plain.frame_times(10)


def test_load_signal_errors_name_file_and_column(tmp_path):
    t = list(np.arange(10) / 10.0)
    p = write_csv(tmp_path / "a.csv", ["time", "force"], zip(t, t))
    with pytest.raises(InputError, match=r"a\.csv: has no load column 'load'; columns are \['time', 'force'\]"):
        read_load_signal(p)
    p = write_csv(tmp_path / "b.csv", ["time", "load"], zip(t[:5], t[:5]))
    with pytest.raises(InputError, match=r"b\.csv: has 5 data rows; at least 8"):
        read_load_signal(p)
    back = t.copy()
    back[6] = 0.1
    p = write_csv(tmp_path / "c.csv", ["time", "load"], zip(back, t))
    with pytest.raises(InputError, match=r"c\.csv: time must increase strictly: data row 7"):
        read_load_signal(p)
    p = write_csv(tmp_path / "d.csv", ["time", "load"], zip(t, t[:3] + [float("nan")] + t[4:]))
    with pytest.raises(InputError, match=r"d\.csv: column 'load' has a non-finite value on data row 4"):
        read_load_signal(p)
    p = tmp_path / "e.csv"
    p.write_text("time,load\n0,1\n0.1,abc\n")
    with pytest.raises(InputError, match=r"e\.csv: expected numbers"):
        read_load_signal(p)
    with pytest.raises(InputError, match="no such load-signal file"):
        read_load_signal(tmp_path / "nope.csv")
    (tmp_path / "empty.csv").write_text("# nothing\n")
    with pytest.raises(InputError, match="is empty"):
        read_load_signal(tmp_path / "empty.csv")


def test_read_frame_times(tmp_path):
    # not a physics check: reading frame-time files
    t = np.cumsum(np.full(12, 0.02))
    np.save(tmp_path / "t.npy", t)
    np.testing.assert_array_equal(read_frame_times(tmp_path / "t.npy", n_frames=12), t)
    (tmp_path / "t.txt").write_text("\n".join(repr(float(v)) for v in t) + "\n")
    np.testing.assert_array_equal(read_frame_times(tmp_path / "t.txt"), t)
    write_csv(tmp_path / "t.csv", ["frame", "stamp"], zip(range(12), t))
    np.testing.assert_array_equal(read_frame_times(tmp_path / "t.csv", column="stamp"), t)
    with pytest.raises(InputError, match="has 12 frame times, the stack has 13"):
        read_frame_times(tmp_path / "t.npy", n_frames=13)
    np.save(tmp_path / "bad.npy", t[::-1])
    with pytest.raises(InputError, match="increase strictly"):
        read_frame_times(tmp_path / "bad.npy")


# ----------------------------------------------------------------------------- frequency, phase
def crlb_frequency_sd(amplitude, sigma, n, fs):
    """Cramer-Rao bound on the frequency of a sinusoid in white noise, Hz.

    var(f) >= 12 / ((2 pi)^2 eta N (N^2 - 1)) cycles^2/sample^2 with eta = A^2 / (2 sigma^2)
    (Rife & Boorstyn, IEEE Trans. Inf. Theory 20(5), 1974; Kay 1993, Example 3.14 — from memory).
    """
    eta = amplitude**2 / (2 * sigma**2)
    return fs * math.sqrt(12.0 / ((2 * math.pi) ** 2 * eta * n * (n**2 - 1)))


def test_estimate_frequency_reaches_the_cramer_rao_bound(rng):
    from scipy.signal import periodogram

    fs, n, amp, sigma, f = 200.0, 400, 1.0, 0.2, 7.31
    t = np.arange(n) / fs
    errors = []
    for _ in range(30):
        phase = rng.uniform(-np.pi, np.pi)
        v = 2.0 + amp * np.cos(2 * np.pi * f * t + phase) + sigma * rng.standard_normal(n)
        fe = estimate_frequency(t, v)
        # SciPy's periodogram peak is within one bin (fs / N) of the refined value
        freqs, p = periodogram(v, fs=fs)
        assert abs(fe - freqs[np.argmax(p)]) <= fs / n
        errors.append(fe - f)
    rms = float(np.sqrt(np.mean(np.square(errors))))
    bound = crlb_frequency_sd(amp, sigma, n, fs)
    # least squares is efficient at this SNR (eta = 12.5), so rms^2 / bound^2 ~ chi2(30)/30:
    # 0.6x and 1.5x are its 0.03 % and 0.01 % quantiles (the low side guards a bogus pass)
    assert 0.6 * bound < rms < 1.5 * bound


def test_estimate_frequency_uneven_sampling_drift_and_harmonic(rng):
    t = np.sort(rng.uniform(0.0, 12.0, 3000))               # an uneven clock
    v = 0.3 * t + np.cos(2 * np.pi * 4.2 * t + 1.0) + 0.1 * np.cos(2 * np.pi * 8.4 * t) \
        + 0.05 * rng.standard_normal(t.size)
    # Cramer-Rao bound (Rife & Boorstyn 1974) ~1e-5 Hz here; 2e-4 leaves room for the drift and
    # the harmonic, which the bound does not cover
    assert estimate_frequency(t, v) == pytest.approx(4.2, abs=2e-4)


def test_estimate_frequency_rejects_bad_input():
    with pytest.raises(ValueError, match="length >= 8"):
        estimate_frequency(np.arange(5.0), np.arange(5.0))
    with pytest.raises(ValueError, match="strictly increasing"):
        estimate_frequency(np.zeros(10), np.arange(10.0))


def test_load_reference_exact_on_a_clean_signal():
    # Independent forward model: a noise-free load written here with a known mean, slope, range,
    # phase and second harmonic; least squares must return them to rounding.
    t = 0.37 + np.arange(2000) / 500.0
    f, phi = 6.25, 0.7
    load = 3.0 + 0.01 * (t - 2.0) + 1.5 * np.cos(2 * np.pi * f * t + phi) + 0.03 * np.cos(2 * (2 * np.pi * f * t + phi))
    ref = load_reference(t, load, f)
    assert isinstance(ref, LoadReference)
    assert ref.range == pytest.approx(3.0, rel=1e-10)
    assert ref.phase == pytest.approx(phi, abs=1e-10)
    assert ref.second_harmonic_ratio == pytest.approx(0.02, rel=1e-8)
    mid = 0.5 * (t[0] + t[-1])
    assert ref.mean == pytest.approx(3.0 + 0.01 * (mid - 2.0), rel=1e-10)
    # L = mean + range/2 cos(theta) at the fundamental
    np.testing.assert_allclose(np.cos(ref.theta(t)), np.cos(2 * np.pi * f * t + phi), atol=1e-9)


def test_load_reference_agrees_with_scipy_curve_fit(rng):
    from scipy.optimize import curve_fit

    t = np.arange(1500) / 300.0
    f = 5.0
    load = 10.0 + 4.0 * np.cos(2 * np.pi * f * t - 2.5) + 0.2 * rng.standard_normal(t.size)
    ref = load_reference(t, load, f)

    def model(tt, m, r, p, s, a2, b2):
        th = 2 * np.pi * f * tt + p
        return m + s * (tt - 2.5) + r / 2 * np.cos(th) + a2 * np.cos(2 * th) + b2 * np.sin(2 * th)

    popt, _ = curve_fit(model, t, load, p0=[9.0, 3.0, -2.0, 0.0, 0.0, 0.0])   # SciPy reference
    p_scipy = math.remainder(popt[2], 2 * math.pi)
    assert ref.range == pytest.approx(popt[1], rel=1e-6)
    assert ref.phase == pytest.approx(p_scipy, abs=1e-6)
    assert ref.mean == pytest.approx(popt[0] + popt[3] * (0.5 * (t[0] + t[-1]) - 2.5), rel=1e-8)


def test_load_reference_refuses_a_flat_load(rng):
    t = np.arange(200) / 100.0
    with pytest.raises(ValueError, match="no cycle at 5 Hz"):
        load_reference(t, 1.0 + 1e-3 * rng.standard_normal(t.size), 5.0)
    with pytest.raises(ValueError, match="cannot be resolved"):
        load_reference(t, np.cos(2 * np.pi * 50 * t), 50.0)     # at half the sampling rate


# ----------------------------------------------------------------------------- precomputed maps
@pytest.fixture
def maps(rng):
    T0 = 295.0 + rng.normal(0, 0.2, (6, 9))
    dT = -0.5 + rng.normal(0, 0.01, (6, 9))
    return {"T0": T0, "delta_T": dT, "phase": rng.uniform(-20, 20, (6, 9)),
            "delta_T_std": np.full((6, 9), 2e-3)}


def test_maps_from_netcdf_with_units(maps, tmp_path):
    # not a physics check: reading maps and converting their units
    netCDF4 = pytest.importorskip("netCDF4")
    p = tmp_path / "m.nc"
    with netCDF4.Dataset(p, "w") as ds:
        ds.createDimension("y", 6)
        ds.createDimension("x", 9)
        for name, units, scale in (("T0", "K", 1.0), ("dT", "mK", 1e3), ("phase", "rad", np.pi / 180)):
            v = ds.createVariable(name, "f8", ("y", "x"))
            v.units = units
            v[:] = maps[{"dT": "delta_T"}.get(name, name)] * scale
    got = read_thermal_maps(p, variables={"delta_T": "dT"})
    assert set(got) == {"T0", "delta_T", "phase"}
    assert all(a.dtype == np.float32 and a.shape == (6, 9) for a in got.values())
    np.testing.assert_allclose(got["delta_T"], maps["delta_T"], rtol=1e-6)   # mK -> K
    np.testing.assert_allclose(got["phase"], maps["phase"], rtol=1e-5, atol=1e-5)   # rad -> deg
    with netCDF4.Dataset(tmp_path / "c.nc", "w") as ds:
        ds.createDimension("y", 6)
        ds.createDimension("x", 9)
        for name in ("T0", "delta_T"):
            v = ds.createVariable(name, "f8", ("y", "x"))
            v.units = "degC" if name == "T0" else "K"
            v[:] = maps[name] - 273.15
    with pytest.raises(InputError, match=r"c\.nc: T0 is in degrees Celsius"):
        read_thermal_maps(tmp_path / "c.nc")


def test_maps_from_tiff_pages(maps, tmp_path):
    # not a physics check: reading maps from TIFF pages
    tifffile = pytest.importorskip("tifffile")
    pages = np.stack([maps[q] for q in ("T0", "delta_T", "phase", "delta_T_std")]).astype(np.float32)
    tifffile.imwrite(tmp_path / "m.tif", pages, photometric="minisblack")
    got = read_thermal_maps(tmp_path / "m.tif")
    for q in ("T0", "delta_T", "phase", "delta_T_std"):
        np.testing.assert_array_equal(got[q], maps[q].astype(np.float32))
    tifffile.imwrite(tmp_path / "o.tif", pages[[1, 0]], photometric="minisblack")
    got = read_thermal_maps(tmp_path / "o.tif", variables=["delta_T", "T0"])
    np.testing.assert_array_equal(got["T0"], pages[0])


def test_maps_from_csv_grids_and_long_table(maps, tmp_path):
    # not a physics check: reading maps from CSV
    paths = {}
    for q in ("T0", "delta_T"):
        paths[q] = tmp_path / f"{q}.csv"
        np.savetxt(paths[q], maps[q], delimiter=",", fmt="%.17g")
    got = read_thermal_maps(paths)
    np.testing.assert_array_equal(got["T0"], maps["T0"].astype(np.float32))
    rr, cc = np.nonzero(np.ones((6, 9), bool))
    keep = np.arange(rr.size) != 10              # one pixel absent from the table
    rows = [(int(r), int(c), float(maps["T0"][r, c]), float(maps["delta_T"][r, c]))
            for r, c in zip(rr[keep], cc[keep])]
    write_csv(tmp_path / "long.csv", ["row", "col", "T0", "delta_T"], rows)
    got = read_thermal_maps(tmp_path / "long.csv")
    assert got["T0"].shape == (6, 9) and np.isnan(got["T0"][rr[10], cc[10]])
    np.testing.assert_array_equal(got["delta_T"][keep.reshape(6, 9)],
                                  maps["delta_T"].astype(np.float32)[keep.reshape(6, 9)])


def test_maps_validation_messages(maps, tmp_path):
    np.savetxt(tmp_path / "T0.csv", maps["T0"] - 273.15, delimiter=",")
    np.savetxt(tmp_path / "dT.csv", maps["delta_T"], delimiter=",")
    with pytest.raises(InputError, match=r"T0\.csv: T0 must be an absolute temperature in kelvin.*Celsius"):
        read_thermal_maps({"T0": tmp_path / "T0.csv", "delta_T": tmp_path / "dT.csv"})
    np.savetxt(tmp_path / "T0k.csv", maps["T0"], delimiter=",")
    np.savetxt(tmp_path / "small.csv", maps["delta_T"][:5], delimiter=",")
    with pytest.raises(InputError, match="maps differ in shape"):
        read_thermal_maps({"T0": tmp_path / "T0k.csv", "delta_T": tmp_path / "small.csv"})
    with pytest.raises(ValueError, match="must include 'delta_T'"):
        read_thermal_maps({"T0": tmp_path / "T0k.csv"})
    write_csv(tmp_path / "nocol.csv", ["row", "col", "T0"], [(0, 0, 295.0)])
    with pytest.raises(InputError, match="has no column 'delta_T'"):
        read_thermal_maps(tmp_path / "nocol.csv")
    write_csv(tmp_path / "dup.csv", ["row", "col", "T0", "delta_T"], [(0, 0, 295.0, -0.1)] * 2)
    with pytest.raises(InputError, match="appears twice"):
        read_thermal_maps(tmp_path / "dup.csv")
    (tmp_path / "m.xyz").write_text("1")
    with pytest.raises(InputError, match="unknown map format"):
        read_thermal_maps(tmp_path / "m.xyz")


def test_maps_read_back_from_a_result_file(rng, tmp_path):
    # not a physics check: a round trip through result.nc
    # lock-in maps written through the project's data model come back unchanged (NaN kept)
    from fusion.datamodel import result_dataset
    from fusion.io import write_netcdf
    from fusion.thermal import lockin

    t = np.arange(200) / 40.0
    frames = 294.0 - 0.3 * np.cos(2 * np.pi * 5.0 * t)[:, None, None] + 0.01 * rng.standard_normal((200, 5, 7))
    frames[:, 2, 3] = 294.0                                   # a dead pixel: NaN in every map
    maps = lockin(frames, frame_rate=40.0, frequency=5.0).to_maps()
    write_netcdf(result_dataset(maps), tmp_path / "result.nc")
    got = read_thermal_maps(tmp_path / "result.nc")
    assert set(got) == {"T0", "delta_T", "phase", "delta_T_std", "delta_T_quadrature"}
    for q in got:
        np.testing.assert_array_equal(got[q], maps[q])        # float32 round trip is exact
