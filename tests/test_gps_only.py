"""GPS-only logs: time, position and speed (or no speed), what phones and GPS lap timers record.

The accelerations are derived (limitlap.derived). Checked against things outside the
project: closed forms (a least-squares slope's variance, a quadratic's derivative, the
lateral acceleration v²/R on a circle), SciPy's Savitzky-Golay filter, geographiclib's
geodesics, and sessions from the generator (limitlap.synth: its truth -- true line, lap
times, ideal lap, planted mistakes, its noise-free motion -- is made before any logging,
the ideal by the solver on the true line with the true car). GPS error as the generator
makes it: a Gauss-Markov part (0.7 m, 60 s) plus 0.1 m white per axis, speed with 0.1 m/s
white noise (a GNSS receiver's Doppler speed: 0.05-0.1 m/s on data sheets, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pymap3d
import pytest
from geographiclib.geodesic import Geodesic
from scipy import integrate, signal

from limitlap import corners as corners_mod
from limitlap import derived, driven, laps, logfile, pipeline, synth
from limitlap.errors import InputError
from limitlap.resources import bundled_path
from tests.robust_data import run_cli

GPS_ONLY = ("latitude", "longitude", "speed")
SEED = 3


def gps_only_session(hz: float, seed: int = SEED, **kw) -> synth.Session:
    """Three flying laps, no lap-to-lap variation (the planted mistakes are the only time lost), rows at the GNSS rate."""
    return synth.generate_session(
        n_laps=3,
        lap_variation=0.0,
        seed=seed,
        sample_rate_hz=hz,
        gps_rate_hz=hz,
        speed_noise_m_s=0.1,
        **kw,
    )


def written(session, path, columns=GPS_ONLY):
    path.write_text(synth.session_csv_text(session, columns=columns), encoding="utf-8")
    return path


def analysed(session, path, **kw):
    return pipeline.analyse(path, gate=laps.Gate.geodetic(*session.truth.gate_latlon), **kw)


def derived_log(path, session):
    """The log read and its accelerations derived as the pipeline does, by the public steps: every complete lap's line rebuilt, then :func:`limitlap.derived.add_accelerations`."""
    log = logfile.read_log(path)
    found = laps.split_laps(log, laps.Gate.geodetic(*session.truth.gate_latlon))
    rebuilt = [(lp, driven.reconstruct_lap(log, lp)) for lp in found if lp.complete]
    return log, derived.add_accelerations(log, rebuilt), found


# ------------------------------------------------------------------ the derivative itself


def test_derivative_of_a_quadratic_is_exact():
    # A local quadratic fitted by least squares reproduces a quadratic exactly, so its
    # slope is the derivative b + 2 c t everywhere, the ends included (Savitzky & Golay
    # 1964). Uneven blanks: the channel on every 2nd row, as a 10 Hz speed in 20 Hz rows.
    t = np.arange(400) * 0.05
    v = 12.0 + 3.0 * t - 0.2 * t * t
    v[1::2] = np.nan
    d = derived.derivative(t, v, 0.1, sigma=0.05, default_sigma=0.1)
    assert d.interval_s == pytest.approx(0.1)
    # every row from the first sample to the last (the last row, after it, is blank)
    np.testing.assert_allclose(d.values[:-1], 3.0 - 0.4 * t[:-1], atol=1e-9)
    assert np.isnan(d.values[-1])


def test_derivative_is_scipys_savitzky_golay_on_even_samples():
    # Reference library: scipy.signal.savgol_filter with the window the noise chose.
    rng = np.random.default_rng(1)
    t = np.arange(600) / 25.0
    v = 30.0 + 8.0 * np.sin(0.7 * t) + 0.1 * rng.standard_normal(t.size)
    d = derived.derivative(t, v, derived.ACCEL_NOISE_TARGET_M_S2, default_sigma=0.1)
    ref = signal.savgol_filter(v, d.window, 2, deriv=1, delta=1 / 25.0, mode="interp")
    np.testing.assert_allclose(d.values, ref, rtol=0, atol=1e-9)


def test_window_noise_is_the_least_squares_slopes():
    # Closed form: the least-squares slope of n points dt apart with white noise sigma
    # has variance 12 sigma² / (n (n² - 1) dt²) (straight-line regression: the slope's
    # variance is sigma² / sum (t - mean t)²). The window chosen is the shortest that
    # brings it to the target, and white noise through it comes out as predicted.
    dt, sigma, target = 0.1, 0.1, derived.ACCEL_NOISE_TARGET_M_S2
    n = derived.savgol_window(sigma, dt, target)

    def slope_sd(m):
        return sigma * math.sqrt(12.0 / (m * (m * m - 1))) / dt

    assert slope_sd(n) <= target < slope_sd(n - 2)
    h = derived.savgol_kernel(n, dt)
    assert sigma * math.sqrt(float(h @ h)) == pytest.approx(slope_sd(n), rel=1e-9)
    rng = np.random.default_rng(2)
    t = np.arange(200_000) * dt
    d = derived.derivative(t, sigma * rng.standard_normal(t.size), target, default_sigma=0.1)
    assert d.source_noise == pytest.approx(sigma, rel=0.02)  # measured from the samples
    assert float(np.std(d.values)) == pytest.approx(slope_sd(n), rel=0.02)


def test_derivative_never_reaches_across_a_gap():
    # 10 Hz speed with a 3 s dropout: either side is differentiated on its own (a jump
    # of speed across the gap makes no spike), the rows in the gap stay blank.
    t = np.arange(300) * 0.1
    v = np.where(t < 15.0, 20.0, 35.0) + 0.5 * t
    v[(t > 13.0) & (t < 16.0)] = np.nan
    d = derived.derivative(t, v, 0.1, sigma=0.02, default_sigma=0.1)
    inside = np.isfinite(v)
    np.testing.assert_allclose(d.values[inside], 0.5, atol=1e-9)
    assert np.isnan(d.values[~inside]).all()


# ------------------------------------------------------------------ a circle, closed forms

R_M, V_M_S, HZ = 80.0, 25.0, 10.0


def circle_log(tmp_path, sign, *, speed=True, noise_m=0.1, seed=4):
    """A car at constant speed round a circle, counter-clockwise (sign +1) or clockwise, GPS-only at 10 Hz: the log's path and the gate."""
    rng = np.random.default_rng(seed)
    t = np.arange(0.0, 3.5 * 2 * math.pi * R_M / V_M_S, 1.0 / HZ)
    ang = sign * (V_M_S * t / R_M - 3.0)  # the first gate crossing 10 s into the log
    x = R_M * np.cos(ang) + noise_m * rng.standard_normal(t.size)
    y = R_M * np.sin(ang) + noise_m * rng.standard_normal(t.size)
    origin = (-33.8612, 147.2391, 286.0)
    lat, lon, _ = pymap3d.enu2geodetic(x, y, 0.0, *origin)
    v = V_M_S + 0.1 * rng.standard_normal(t.size)
    head = "time [s],latitude [deg],longitude [deg]" + (",speed [m/s]" if speed else "")
    rows = [
        f"{a:.2f},{b:.9f},{c:.9f}" + (f",{d:.3f}" if speed else "")
        for a, b, c, d in zip(t, lat, lon, v, strict=True)
    ]
    path = tmp_path / f"circle_{sign:+d}.csv"
    path.write_text(head + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    glat, glon, _ = pymap3d.enu2geodetic(R_M, 0.0, 0.0, *origin)
    return path, laps.Gate.geodetic(float(glat), float(glon))


@pytest.mark.parametrize("sign", [1, -1])
def test_lateral_acceleration_on_a_circle_is_v2_over_r(tmp_path, sign):
    # a_y = v² κ = v² / R on a circle (kinematics), + to the left (ISO 8855): a
    # counter-clockwise circle is a left-hand bend. 25 m/s on 80 m: 7.8125 m/s².
    # On average within 1 % (measured: 0.05 %, seeds 1-6, both ways round). Its scatter
    # is the fixes' white noise through the GNSS-only line's smoothing spline, a filter
    # H(w) = 1 / (1 + (w T / 2 pi)^4) on fixes dt apart (limitlap.driven, GNSS_CUTOFF_S:
    # Craven & Wahba 1979 [M]): the normal acceleration, the path's second derivative,
    # has variance sigma² dt / pi * integral_0^(pi/dt) w^4 H(w)² dw (white noise of
    # two-sided density sigma² dt). Measured 0.99-1.03 times that; bounds 0.8-1.2.
    path, gate = circle_log(tmp_path, sign)
    log = logfile.read_log(path)
    found = laps.split_laps(log, gate)
    rebuilt = [(lp, driven.reconstruct_lap(log, lp)) for lp in found if lp.complete]
    assert len(rebuilt) >= 2
    acc = derived.add_accelerations(log, rebuilt)
    assert acc.missing == ("accel_lon", "accel_lat") and not acc.speed_from_fixes
    ay = log.channels["accel_lat"]
    inside = np.isfinite(ay)
    expected = sign * V_M_S**2 / R_M
    assert float(np.mean(ay[inside])) == pytest.approx(expected, rel=0.01)
    period = rebuilt[0][1].agreement["noise"]["gnss_cutoff_s"]
    wc, dt = 2 * math.pi / period, 1.0 / HZ
    shape, _ = integrate.quad(lambda u: u**4 / (1 + u**4) ** 2, 0.0, math.pi / dt / wc)
    predicted = 0.1 * math.sqrt(dt / math.pi * wc**5 * shape)
    scatter = float(np.sqrt(np.mean((ay[inside] - expected) ** 2)))
    assert 0.8 * predicted < scatter < 1.2 * predicted
    # constant speed: a_x is the speed's noise through the window only
    ax = log.channels["accel_lon"][inside]
    assert abs(float(np.mean(ax))) < 0.02 and float(np.std(ax)) < 2 * acc.accel_lon.noise
    # the yaw rate of the same line: v kappa = v / R (+ counter-clockwise)
    kappa = rebuilt[0][1].line.curvature_1_m
    r = derived.yaw_rate_from_curvature(V_M_S, kappa)
    assert float(np.mean(r)) == pytest.approx(sign * V_M_S / R_M, rel=0.01)
    # marked derived, so never taken for an inertial channel
    assert not log.measured("accel_lat") and log.has("accel_lat")
    assert driven.reconstruct_lap(log, rebuilt[0][0]).agreement["fusion"] == ["gnss"]


def test_speed_from_fixes_is_the_geodesic_distance_over_time(tmp_path):
    # Reference library: geographiclib's geodesic between successive WGS84 fixes over
    # their time apart. Noise-free fixes, so the window is the shortest (3 fixes: the
    # chord over two intervals); chords over one and two intervals are shorter than the
    # arc by (w dt)² / 24 and (w dt)² / 6 (w = v / R): 4e-5 and 1.6e-4 here. The reader's
    # projection (pymap3d, east-north-up) and the derivative must agree to 2e-4.
    path, _ = circle_log(tmp_path, 1, speed=False, noise_m=0.0)
    log = logfile.read_log(path)
    assert "speed" in log.derived and not log.measured("speed")
    lat, lon = np.loadtxt(path, delimiter=",", skiprows=1, usecols=(1, 2), unpack=True)
    geo = Geodesic.WGS84
    steps = [
        geo.Inverse(a, b, c, d)["s12"]
        for a, b, c, d in zip(lat[:-1], lon[:-1], lat[1:], lon[1:], strict=True)
    ]
    geodesic_speed = float(np.mean(steps)) * HZ
    v = log.channels["speed"]
    assert np.isfinite(v).all()
    assert log.derived["speed"].window == 3
    # the first and last fix: the slope of the quadratic through the first (last) three
    # at its end, off the arc by (w dt)² / 3 (3.3e-4): 4e-4 there
    np.testing.assert_allclose(v[1:-1], geodesic_speed, rtol=2e-4)
    np.testing.assert_allclose(v[[0, -1]], geodesic_speed, rtol=4e-4)
    assert geodesic_speed == pytest.approx(V_M_S, rel=1e-4)
    assert any("no 'speed' channel: speed derived from the GPS fixes" in w for w in log.warnings)


# ------------------------------------------------------------------ generated sessions

#: The task's bound for GPS-only logs: the ideal within 2 % of the generator's. Measured
#: on these sessions (rows at the GNSS rate, seeds 1-6), with the derived a_y's noise read
#: from the laps: -0.66 to -0.18 % (before it was read: -1.05 to -0.08 %); cut from 100 Hz
#: logs (benchmarks/gps_only.py) -0.90 to -0.16 %, the full-IMU log of the same session
#: -0.02 to +0.13 %.
IDEAL_REL = 0.02
#: Without speed (speed from the fixes): measured -0.41 to +1.34 % here (seeds 1-6, both
#: rates), -0.58 to +0.94 % in benchmarks/gps_only.py; the bound is 1.5 %.
NO_SPEED_IDEAL_REL = 0.015


@pytest.fixture(scope="module", params=[10.0, 25.0], ids=["10Hz", "25Hz"])
def gps_only(request, tmp_path_factory):
    s = gps_only_session(request.param)
    path = written(s, tmp_path_factory.mktemp("gps") / f"gps_{request.param:g}.csv")
    return s, analysed(s, path), path


def test_lap_times_within_005_s(gps_only):
    s, a, _ = gps_only
    got = {lp.number: lp.time_s for lp in a.laps if lp.complete}
    for number, true_s in enumerate(s.truth.lap_times_s, start=1):
        assert got[number] == pytest.approx(true_s, abs=0.05)


def test_ideal_within_2_percent_of_the_generators(gps_only):
    s, a, _ = gps_only
    assert a.ideal.lap_time_s == pytest.approx(s.truth.ideal_lap_time_s, rel=IDEAL_REL)


def planted_corners(a, truth) -> set[str]:
    """The corners holding the planted apexes (mapped by distance fraction, as in tests/test_acceptance.py)."""
    c = a.comparison
    scale = c.length_m / truth.line.length_m
    seg = corners_mod.segment_index(
        [m.apex_m * scale for m in truth.mistakes], c.length_m, a.corners
    )
    return {c.corners[j].name for j in seg.tolist()}


def test_planted_corners_rank_first(gps_only):
    s, a, _ = gps_only
    planted = planted_corners(a, s.truth)
    assert {k.name for k in a.comparison.ranked()[: len(planted)]} == planted


def test_the_warning_says_what_was_derived_once(gps_only):
    _, a, path = gps_only
    lines = [str(w) for w in a.warnings if "accelerations derived" in str(w)]
    assert len(lines) == 1
    assert lines[0].startswith(f"{path}: no 'accel_lon' or 'accel_lat' channel: accelerations ")
    assert "derived from speed and the GPS line; grip limits from them are smoothed by " in lines[0]
    # what the measured bias of such an ideal is (limitlap.derived.IDEAL_OFF_PERCENT)
    assert "the ideal lap may come out up to about 1 % fast" in lines[0]
    # nothing was checked against itself: the line's data check has no channel to show
    assert not a.driven.curvature_check.available
    assert a.driven.agreement["fusion"] == ["gnss"]
    assert not any("agrees poorly" in str(w) or "disagrees" in str(w) for w in a.warnings)


def test_derived_ax_against_the_generators_true_ax(tmp_path):
    # The generator's noise-free motion (the same seed at 100 Hz with no sensor noise;
    # its rows at 10 Hz are every 10th) gives the true a_x: its longitudinal channel is
    # dv/dt + g sin(grade) (synth: specific force), the grade from the true line.
    s = gps_only_session(10.0)
    log, acc, _ = derived_log(written(s, tmp_path / "gps.csv"), s)
    clean = synth.generate_session(
        n_laps=3, lap_variation=0.0, seed=SEED, sample_rate_hz=100.0, gps_rate_hz=10.0,
        speed_noise_m_s=0.0, accel_noise_g=0.0,
    )  # fmt: skip
    tr = clean.truth
    grade = np.interp(
        tr.lap_distance_m, tr.line.distance_m, tr.line.gradient, period=tr.line.length_m
    )
    true_ax = clean.channels["accel_lon"] - 9.80665 * grade / np.sqrt(1 + grade * grade)
    n = log.time_s.size
    true_ax, true_v = true_ax[::10][:n], clean.channels["speed"][::10][:n]
    ax = log.channels["accel_lon"]  # no altitude column: the line is level, a_x = dv/dt
    used = np.isfinite(log.channels["accel_lat"]) & (true_v > 10.0)
    # 1. Like with like: the same Savitzky-Golay derivative (SciPy) of the true speed.
    # What is left is the speed's noise through the window: predicted 0.08-0.10 m/s²
    # (acc.accel_lon.noise); measured 0.08-0.10. Bound: 1.5 times the prediction.
    w = acc.accel_lon.window
    ref = signal.savgol_filter(true_v, w, 2, deriv=1, delta=0.1, mode="interp")
    rms_noise = float(np.sqrt(np.mean((ax - ref)[used] ** 2)))
    assert rms_noise < 1.5 * acc.accel_lon.noise
    # 2. Against the true a_x itself: the generator switches from full drive to full
    # braking within one station, steps a window smooths over its length. The derived
    # a_x may differ from the truth by that smoothing (the true a_x through the same
    # window, from the 100 Hz truth) plus the noise, no more. Measured: 2.24-2.48 m/s²
    # RMS at 10 Hz (seeds 1-3), the smoothing alone 2.2-2.4; median error 0.19 m/s².
    smoothing = signal.savgol_filter(true_v, w, 2, deriv=1, delta=0.1, mode="interp") - true_ax
    rms_truth = float(np.sqrt(np.mean((ax - true_ax)[used] ** 2)))
    rms_smooth = float(np.sqrt(np.mean(smoothing[used] ** 2)))
    assert rms_truth < rms_smooth + 3.0 * acc.accel_lon.noise
    assert float(np.median(np.abs(ax - true_ax)[used])) < 0.3


@pytest.fixture(scope="module")
def no_speed(tmp_path_factory):
    s = gps_only_session(10.0)
    path = written(
        s, tmp_path_factory.mktemp("nospeed") / "no_speed.csv", ("latitude", "longitude")
    )
    return s, analysed(s, path), path


def test_without_speed_the_fixes_give_it(no_speed):
    s, a, path = no_speed
    got = {lp.number: lp.time_s for lp in a.laps if lp.complete}
    for number, true_s in enumerate(s.truth.lap_times_s, start=1):
        assert got[number] == pytest.approx(true_s, abs=0.05)
    assert a.ideal.lap_time_s == pytest.approx(s.truth.ideal_lap_time_s, rel=NO_SPEED_IDEAL_REL)
    # the largest planted mistake (T1, 0.49 s in the truth) still ranks first
    assert a.comparison.ranked()[0].name == "T1"
    warned = [str(w) for w in a.warnings]
    assert any(
        w.startswith(f"{path}: no 'speed' channel: speed derived from the GPS fixes")
        for w in warned
    )
    assert any(
        "derived from speed (itself from the GPS fixes) and the GPS line" in w
        and "the ideal lap may come out up to about 1.5 % fast or slow" in w
        for w in warned
    )


# ------------------------------------------------------------------ messages


def test_a_failed_grip_estimate_names_the_vehicle_file_and_the_derivation(tmp_path):
    # A GPS-only log of a car never faster than 8 m/s against a complete vehicle file:
    # the lap has no sample the grip estimate can use. The message names the vehicle file
    # (its envelope is what the lap is measured against), the lap and the log, and says
    # the accelerations were derived (and from what).
    rng = np.random.default_rng(5)
    t = np.arange(0.0, 3.5 * 2 * math.pi * 20.0 / 8.0, 0.1)
    x, y = 20.0 * np.cos(8.0 * t / 20.0), 20.0 * np.sin(8.0 * t / 20.0)
    origin = (-33.8612, 147.2391, 286.0)
    lat, lon, _ = pymap3d.enu2geodetic(x + 0.05 * rng.standard_normal(t.size), y, 0.0, *origin)
    path = tmp_path / "slow.csv"
    rows = [f"{a:.1f},{b:.9f},{c:.9f},28.8" for a, b, c in zip(t, lat, lon, strict=True)]
    path.write_text("time [s],latitude,longitude,speed [km/h]\n" + "\n".join(rows) + "\n")
    glat, glon, _ = pymap3d.enu2geodetic(20.0, 0.0, 0.0, *origin)
    vehicle = bundled_path("vehicles", "gt_coupe.toml")
    with pytest.raises(InputError) as err:
        pipeline.analyse(path, vehicle=vehicle, gate=f"{glat:.7f},{glon:.7f}")
    msg = str(err.value)
    assert msg.startswith(f"{vehicle}: lap 1 of {path}: no samples faster than 10 m/s")
    assert "no 'accel_lon' or 'accel_lat' channel: the accelerations were derived from" in msg


def test_the_command_line_takes_a_gps_only_log(tmp_path, capsys, monkeypatch):
    # One warning line (naming the file) says what was derived; the run succeeds and the
    # summary carries the same line.
    s = gps_only_session(10.0)
    path = written(s, tmp_path / "phone.csv")
    lat, lon = s.truth.gate_latlon
    out = tmp_path / "out"
    args = ["analyse", path, "--gate", f"{lat:.7f},{lon:.7f}", "--out", out, "--no-figures"]
    code, _, err = run_cli([*args, "--quiet"], capsys, monkeypatch)
    assert code == 0, err
    import json

    summary = json.loads((out / "summary.json").read_text())
    derived_lines = [w for w in summary["warnings"] if "accelerations derived" in w]
    assert len(derived_lines) == 1 and str(path) in derived_lines[0]
    assert summary["ideal"]["time_s"] == pytest.approx(s.truth.ideal_lap_time_s, rel=IDEAL_REL)


def test_lap_against_lap_and_one_envelope_of_gps_only_logs(tmp_path, capsys, monkeypatch):
    # The commands that fit one envelope to several logs derive the accelerations too,
    # and say so once per log.
    s = gps_only_session(10.0)
    first = written(s, tmp_path / "first.csv")
    second = written(gps_only_session(10.0, seed=SEED + 1), tmp_path / "second.csv")
    lat, lon = s.truth.gate_latlon
    gate = f"{lat:.7f},{lon:.7f}"
    args = ["versus", first, "--gate", gate, "--out", tmp_path / "v", "--no-figures"]
    code, _, err = run_cli(args, capsys, monkeypatch)
    assert code == 0, err
    assert err.count("accelerations derived from speed and the GPS line") == 1
    args = ["envelope", first, second, "--gate", gate, "--out", tmp_path / "e.toml"]
    code, _, err = run_cli(args, capsys, monkeypatch)
    assert code == 0, err
    for path in (first, second):
        assert f"{path}: no 'accel_lon' or 'accel_lat' channel: accelerations derived" in err
    from limitlap import ingest

    fitted = ingest.read_vehicle(tmp_path / "e.toml", require_complete=True)
    # the lateral friction within the spread measured for one log (1.45 true; derived
    # accelerations put it 1.50-1.61 on seeds 1-6, docs/methods.md)
    assert 1.4 < fitted.mu_lat < 1.7


# ------------------------------------------------------------ the derived a_y's noise


def _circle_lap(number, speed, sigma_a, rng, offset_m=0.0, radius=100.0):
    """A lap on a circle (stations 1 m apart) whose curvature carries white noise of sigma_a / v² (a_y noise sigma_a)."""
    from types import SimpleNamespace

    r = radius + offset_m
    s = np.arange(0.0, 2 * math.pi * r, 1.0)
    kappa = 1.0 / r + rng.normal(0.0, sigma_a / speed**2, s.size)
    line = SimpleNamespace(
        x_m=r * np.cos(s / r), y_m=r * np.sin(s / r), curvature_1_m=kappa,
        distance_m=s, length_m=2 * math.pi * r,
    )  # fmt: skip
    return SimpleNamespace(number=number), SimpleNamespace(
        line=line, speed_m_s=np.full(s.size, speed)
    )


def test_lateral_noise_reads_the_noise_put_into_the_laps():
    # Closed form: each lap's a_y = v² κ carries independent white noise of 0.5 m/s²; the
    # difference of two laps at the same place has sigma 0.5 sqrt(2), and 1.4826 MAD is a
    # normal sample's sigma (the consistency factor, from memory). 3 laps on a 100 m
    # circle: 1,256 differences, the estimate's own scatter about 3 %.
    rng = np.random.default_rng(7)
    laps_ = [_circle_lap(n, 30.0, 0.5, rng) for n in (1, 2, 3)]
    assert derived.lateral_noise(laps_) == pytest.approx(0.5, rel=0.1)
    # an out-lap at two thirds of the speed is not compared (its a_y is another)
    slow = _circle_lap(4, 20.0, 0.5, rng)
    assert derived.lateral_noise([*laps_, slow]) == pytest.approx(
        derived.lateral_noise(laps_), rel=1e-12
    )
    # two laps on lines 5 m apart never share a place: nothing to read
    assert derived.lateral_noise([laps_[0], _circle_lap(5, 30.0, 0.5, rng, offset_m=5.0)]) is None
    assert derived.lateral_noise(laps_[:1]) is None


def test_the_derived_noise_is_taken_out_of_the_envelope(gps_only):
    # The derived a_y's noise, read from the laps, against its error from the generator's
    # own a_y (noise-free motion, same seed): the laps see only the part of the error
    # that differs from lap to lap (the GNSS drift over 60 s and the smoothing's rounding
    # of each corner are much alike on consecutive laps), so the figure is below the
    # whole error but of its size: measured 0.48-0.68 against 0.69-0.78 m/s² (seeds 1
    # and 4). The fit then lifts the envelope off the noise (quality noise_offset_m_s2).
    s, a, _ = gps_only
    read = a.fit.quality["noise_m_s2"]
    assert a.fit.quality["noise_offset_m_s2"] > 0.0
    assert 0.3 < read < 1.0
    # the ideal no faster than the warning says (limitlap.derived.IDEAL_OFF_PERCENT)
    off = (a.ideal.lap_time_s / s.truth.ideal_lap_time_s - 1.0) * 100.0
    assert -derived.IDEAL_OFF_PERCENT[0][1] < off < 0.5  # fixes at 5 Hz or more, speed logged


def test_what_the_warning_says_follows_the_fixes_rate():
    # limitlap.derived.IDEAL_OFF_PERCENT, by the fixes' rate and where speed came from.
    def doubt(rate, from_fixes=False, noise=0.6):
        acc = derived.Accelerations(("accel_lon", "accel_lat"), None, from_fixes, noise, rate)
        return derived.ideal_doubt(acc)

    assert doubt(10.0) == "up to about 1 % fast"
    assert doubt(25.0, from_fixes=True) == "up to about 1.5 % fast or slow"
    assert doubt(10.0, noise=None) == "up to about 1.5 % fast"
    assert doubt(2.0) == "up to about 1.5 % fast"
    assert doubt(1.0) == "up to about 3.5 % fast"
    assert doubt(1.0, from_fixes=True) == "up to about 2.5 % fast or slow"
    assert doubt(math.nan) == "up to about 3.5 % fast"


def test_one_fix_a_second_is_told_and_kept_to(tmp_path):
    # A GPS-only log at 1 Hz (what a phone may give): the fixes a second apart round the
    # line's corners, so the ideal errs fast by more; the warning says how much, and the
    # ideal stays within it (seed 8, the worst of seeds 1-8: -3.11 %).
    s = gps_only_session(1.0, seed=8)
    a = analysed(s, written(s, tmp_path / "one_hz.csv"))
    (line,) = [str(w) for w in a.warnings if "accelerations derived" in str(w)]
    assert "the ideal lap may come out up to about 3.5 % fast" in line
    off = (a.ideal.lap_time_s / s.truth.ideal_lap_time_s - 1.0) * 100.0
    assert -derived.IDEAL_OFF_PERCENT[-1][1] < off < 0.5


def test_the_report_says_what_was_taken_out_for_noise(gps_only):
    # The report's method sentence names the lift the fit took out (quality
    # noise_offset_m_s2), for a GPS-only log the derived a_y's noise read from the laps;
    # a fit that took none out says so rather than claiming a sensor's noise was removed.
    import dataclasses

    from limitlap import outputs, report

    _, a, _ = gps_only
    v = outputs.report_view(a)
    lift = a.fit.quality["noise_offset_m_s2"]
    assert f"taken out ({lift:.2f} m/s²)" in report._envelope_source(v)
    none = dataclasses.replace(a.fit, quality={**a.fit.quality, "noise_offset_m_s2": 0.0})
    said = report._envelope_source(dataclasses.replace(v, fit=none))
    assert "with no width taken out for the accelerations' noise" in said
