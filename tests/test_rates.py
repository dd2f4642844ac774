"""Logs at any rate: the analysis of a session thinned to 50, 20, 10 and 5 Hz, a 200 Hz IMU
with 5 Hz GNSS and a dropout, channels at their own rates, the data checks and the
warnings that say what a rate leaves uncertain.

Truth comes from the generator (limitlap.synth: the true line, lap times, ideal lap and
planted mistakes, made by the solver on the true line before any logging), never from
the analysis of a faster log alone; tolerances say where they come from.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter1d

from limitlap import corners as corners_mod
from limitlap import driven, gnss, laps, logfile, pipeline, samples, synth, unit_checks
from limitlap.units import KMH_TO_M_S
from tests.test_driven import session_log, truth_lap

RATES_HZ = (100, 50, 20, 10, 5)
#: The issue's target down to 10 Hz; at 5 Hz (the GNSS falls to 5 Hz too and the 3 Hz
#: low-pass is narrower than a sample) 1 %, twice the largest seen over seeds 1-8 of
#: benchmarks/rates.py's kind of session (0.3 %).
IDEAL_VS_100_HZ = {50: 0.005, 20: 0.005, 10: 0.005, 5: 0.01}


def thinned(text: str, every: int) -> str:
    """Every ``every``-th row of a log's CSV text (all channels kept), header first."""
    lines = text.splitlines()
    return "\n".join([lines[0], *lines[1::every]]) + "\n"


@pytest.fixture(scope="module")
def session():
    # Two flying laps, no lap-to-lap variation (the planted mistakes are then the only
    # time lost), 100 Hz rows, 10 Hz GNSS: the generator's defaults otherwise.
    return synth.generate_session(n_laps=2, lap_variation=0.0, seed=5)


@pytest.fixture(scope="module")
def by_rate(session, tmp_path_factory):
    folder = tmp_path_factory.mktemp("rates")
    text = synth.session_csv_text(session)
    gate = laps.Gate.geodetic(*session.truth.gate_latlon)
    out = {}
    for hz in RATES_HZ:
        path = folder / f"session_{hz}.csv"
        path.write_text(thinned(text, 100 // hz), encoding="utf-8")
        out[hz] = pipeline.analyse(path, gate=gate)
    return out


@pytest.mark.parametrize("hz", RATES_HZ)
def test_lap_times_at_every_rate(session, by_rate, hz):
    # Issue: lap times within 0.05 s of the generator's gate-to-gate times.
    got = {lp.number: lp.time_s for lp in by_rate[hz].laps if lp.complete}
    for number, true_s in enumerate(session.truth.lap_times_s, start=1):
        assert got[number] == pytest.approx(true_s, abs=0.05)


@pytest.mark.parametrize("hz", RATES_HZ[1:])
def test_ideal_lap_stays_with_the_100_hz_one(session, by_rate, hz):
    # Before: 10 Hz came out 1.1 % and 5 Hz 1.4 % faster than 100 Hz on the demo session
    # (noise left in the envelope, fewer samples per bin, chord-smoothed courses).
    ideal = by_rate[hz].ideal.lap_time_s
    assert ideal == pytest.approx(by_rate[100].ideal.lap_time_s, rel=IDEAL_VS_100_HZ[hz])
    # ... and the generator's ideal on the true line with the true car: the 100 Hz
    # acceptance figure (1 %, tests/test_acceptance.py) holds at every rate.
    assert ideal == pytest.approx(session.truth.ideal_lap_time_s, rel=0.01)


@pytest.mark.parametrize("hz", RATES_HZ)
def test_planted_corners_rank_first_at_every_rate(session, by_rate, hz):
    # The corners holding the planted apexes (mapped by distance fraction, as in
    # tests/test_acceptance.py) are the ones with the most time left.
    a, truth = by_rate[hz], session.truth
    c = a.comparison
    scale = c.length_m / truth.line.length_m
    seg = corners_mod.segment_index(
        [m.apex_m * scale for m in truth.mistakes], c.length_m, a.corners
    )
    planted = {c.corners[j].name for j in seg.tolist()}
    assert {k.name for k in c.ranked()[: len(planted)]} == planted


@pytest.mark.parametrize("hz", RATES_HZ)
def test_clean_log_raises_no_data_check_warning(by_rate, hz):
    # Yaw rate and a_y are exactly speed x curvature plus white noise in the generator:
    # compared at one bandwidth with the GNSS path (each channel's own path through the
    # GNSS spline), nothing may be flagged at any rate.
    flagged = [w for w in by_rate[hz].warnings if "agrees poorly" in w or "does not follow" in w]
    assert flagged == []


@pytest.mark.parametrize("hz", [20, 10])
def test_noise_is_taken_out_of_the_envelope_at_low_rates(session, by_rate, hz):
    # At 10-20 Hz the 3 Hz low-pass averages little of the accelerometers' noise: left in
    # the envelope it widens the friction limits by about 2 % (measured: lateral 1.475,
    # braking 1.59 against the true 1.45 and 1.55 with no lift taken out). Taken out
    # (noise lift from the on-limit samples' densest level), within 1 % of the truth.
    fit, true = by_rate[hz].fit, session.truth.vehicle
    assert fit.vehicle.mu_lat == pytest.approx(true.mu_lat, rel=0.01)
    assert fit.vehicle.mu_brk == pytest.approx(true.mu_brk, rel=0.01)
    q = fit.quality
    assert 0.0 < q["noise_offset_m_s2"] <= 2.33 * q["noise_m_s2"]  # within [0, z_0.99 sigma]


def test_noise_warning_names_the_rate_only_where_it_matters(by_rate):
    # 0.03 g white noise per sample: after the 3 Hz low-pass 0.07 m/s² at 100 Hz, but
    # at 5 Hz nothing is averaged (0.3 m/s², 2-3 % of the lateral limit): the grip
    # envelope's noise correction is then an estimate worth stating; at 100 Hz it is not.
    def noise_lines(a):
        return [w for w in a.warnings if "their noise after the low-pass" in w]

    assert noise_lines(by_rate[100]) == []
    (line,) = noise_lines(by_rate[5])
    assert "accelerations at 5 Hz" in line and "ideal lap by about ±" in line


# --------------------------------------------------------------- 200 Hz IMU, 5 Hz GNSS

T3_APEX_AFTER_GATE_S = 21.06  # the generator's ideal reaches T3's apex (226 km/h) then


@pytest.fixture(scope="module")
def imu200(tmp_path_factory):
    # 200 Hz IMU with 5 Hz GNSS and a 3 s dropout centred on T3's apex on lap 1; the
    # true car given, so the line alone is measured.
    kw = {"n_laps": 2, "lap_variation": 0.0, "sample_rate_hz": 200.0, "gps_rate_hz": 5.0}
    gate_s = float(synth.generate_session(**kw, seed=6).truth.gate_times_s[0])
    apex_s = gate_s + T3_APEX_AFTER_GATE_S
    s = synth.generate_session(**kw, seed=6, gps_dropouts=((apex_s - 1.5, 3.0),))
    path = tmp_path_factory.mktemp("imu200") / "imu200.csv"
    path.write_text(synth.session_csv_text(s), encoding="utf-8")
    a = pipeline.analyse(
        path, vehicle=s.truth.vehicle, gate=laps.Gate.geodetic(*s.truth.gate_latlon), lap=1
    )
    return s, a, path


def test_three_second_dropout_is_bridged_and_the_lap_complete(imu200):
    _, a, _ = imu200
    (gap,) = [w for w in a.warnings if "GPS dropout" in w]
    assert "GPS dropout of 3.2 s" in gap and gap.endswith("bridged from speed and yaw rate")
    assert a.lap.number == 1 and a.lap.complete


def test_bridged_fast_corner_keeps_its_curvature_and_minimum_speed(imu200):
    # Through T3 (R 250 m, 226 km/h) the fixes stop for 3 s (190 m): the heading's shape
    # comes from the yaw rate and a_y / v, the GNSS course corrected by that shape
    # either side. Before: a 1.5 s gap there dropped the ideal's minimum to 130 km/h.
    s, a, _ = imu200
    line, truth = a.driven.line, s.truth
    s_true = line.distance_m * truth.line.length_m / line.length_m
    t3 = (s_true > 980.0) & (s_true < 1140.0)  # the arc, clothoids left out
    k_true = np.interp(s_true[t3], truth.line.distance_m, truth.line.curvature_1_m)
    # curvature: mean within 1 % of 1/250 m, no station more than 10 % off (gyro noise
    # 0.5 deg/s at 62 m/s and 0.5 m smoothing: about 6 % of 1/250 m per station, 1.7 s.d.)
    assert np.mean(line.curvature_1_m[t3]) == pytest.approx(np.mean(k_true), rel=0.01)
    assert np.max(np.abs(line.curvature_1_m[t3] / k_true - 1.0)) < 0.10
    # the ideal's minimum speed there within 1 % (2 km/h) of the generator's
    v_true = np.interp(s_true[t3], truth.line.distance_m, truth.ideal_profile.speed_m_s)
    assert a.ideal.speed_m_s[t3].min() == pytest.approx(v_true.min(), rel=0.01)
    # and the whole lap: the ideal within 0.3 % (the 1.3 % the issue saw with this kind
    # of log; 0.3 %: twice what seeds 5-8 gave, measured 0.01-0.15 %)
    assert a.ideal.lap_time_s == pytest.approx(truth.ideal_lap_time_s, rel=0.003)
    flagged = [w for w in a.warnings if "agrees poorly" in w or "does not follow" in w]
    assert flagged == []


def test_channels_at_their_own_rates(imu200, tmp_path):
    # The same 200 Hz rows with the IMU on every 4th row (50 Hz) and speed on every 10th
    # (20 Hz), blank cells between: filtered at their own rates, fitted, not refused.
    s, _, _ = imu200
    n = s.time_s.size
    ch = dict(s.channels)
    for name in ("accel_lon", "accel_lat", "yaw_rate"):
        ch[name] = np.where(np.arange(n) % 4 == 0, ch[name], np.nan)
    ch["speed"] = np.where(np.arange(n) % 10 == 3, ch["speed"], np.nan)
    mixed = synth.Session(s.time_s, ch, s.truth)
    path = tmp_path / "mixed.csv"
    path.write_text(synth.session_csv_text(mixed), encoding="utf-8")
    a = pipeline.analyse(path, gate=laps.Gate.geodetic(*s.truth.gate_latlon), lap=2)
    assert a.fit.quality["fit_rate_hz"] == pytest.approx(100.0)  # 50 Hz, interpolated x2
    # the fitted envelope's ideal against the generator's: the 1 % acceptance figure
    assert a.ideal.lap_time_s == pytest.approx(s.truth.ideal_lap_time_s, rel=0.01)
    sel = samples.select_samples(
        ch["speed"], ch["accel_lon"], ch["accel_lat"], sample_rate_hz=200.0
    )
    assert sel.sample_rate_hz == pytest.approx(50.0)
    assert np.isnan(sel.accel_lat_m_s2[1::4]).all() and not sel.used[1::4].any()


# ------------------------------------------------------------------------ data checks


@pytest.fixture(scope="module")
def short_session():
    return synth.generate_session(n_laps=1, lap_variation=0.0, seed=7)


def test_sign_flipped_yaw_rate_is_still_flagged(short_session):
    # Compared like with like, a yaw rate logged with the wrong sign convention must
    # still be left out of the line and flagged against the GNSS path.
    s = short_session
    dl = driven.reconstruct_lap(session_log(s, invert=("yaw_rate",)), truth_lap(s, 1))
    assert "yaw_rate" not in dl.agreement["fusion"]
    poor = [w for w in dl.warnings if "'yaw_rate' agrees poorly" in w]
    assert poor and dl.agreement["gnss_vs_yaw_rate"]["correlation"] < -0.9


def test_yaw_rate_in_the_wrong_unit_is_still_flagged(short_session):
    # deg/s read as rad/s: 57.3 times too large. Left out and flagged (its curvature's
    # RMS difference from the GNSS path's is then about 56 times the curvature).
    s = short_session
    log = session_log(s)
    log.channels["yaw_rate"] = log.channels["yaw_rate"] / (math.pi / 180.0)
    dl = driven.reconstruct_lap(log, truth_lap(s, 1))
    assert "yaw_rate" not in dl.agreement["fusion"]
    assert any("'yaw_rate' does not follow the GNSS course" in w for w in dl.warnings)
    assert dl.agreement["gnss_vs_yaw_rate"]["relative_rms"] > 10.0


def test_clean_session_agrees_closely_at_one_bandwidth(short_session):
    # The like-with-like figures themselves: correlation above 0.99 and RMS under 10 %
    # of the curvature (measured 0.999 and 3-5 % at 1-25 Hz GNSS), far inside the
    # warning's 0.9 and 25 %.
    s = short_session
    dl = driven.reconstruct_lap(session_log(s), truth_lap(s, 1))
    for name in ("gnss_vs_yaw_rate", "gnss_vs_accel_lat"):
        assert dl.agreement[name]["correlation"] > 0.99
        assert dl.agreement[name]["relative_rms"] < 0.10


@pytest.mark.parametrize("rate_hz", [5.0, 10.0, 25.0])
def test_gnss_check_spline_halves_at_its_cut_off_period_at_any_fix_rate(rate_hz):
    # A smoothing spline of sum (y - f)² + lam int f''² over samples dt apart acts like
    # the filter 1 / (1 + lam dt w^4) (Craven & Wahba 1979 [M]); with lam = (T/2 pi)^4 /
    # dt it passes 1/2 at period T, 1/17 at T/2 and 16/17 at 2T, whatever the rate.
    # Closed-form gains against the spline's on sines; 0.02 covers the spline's
    # departure from the continuous filter at 5 fixes per 1 s period.
    t = np.arange(0.0, 200.0, 1.0 / rate_hz)
    lam = (driven.GNSS_CUTOFF_S / (2 * math.pi)) ** 4 * rate_hz
    mid = slice(t.size // 4, 3 * t.size // 4)
    for period, gain in ((driven.GNSS_CUTOFF_S, 0.5), (driven.GNSS_CUTOFF_S / 2, 1 / 17),
                         (2 * driven.GNSS_CUTOFF_S, 16 / 17)):  # fmt: skip
        y = np.sin(2 * np.pi * t / period)
        fit = driven._smoothing_spline(t, np.column_stack([y, y]), lam)(t)[:, 0]
        assert float(np.dot(fit[mid], y[mid]) / np.dot(y[mid], y[mid])) == pytest.approx(
            gain, abs=0.02
        )


def test_unit_check_raises_nothing_with_1_hz_gnss(tmp_path):
    # Like with like: the channels are averaged over the span the fixes' differences
    # see. Before, the accelerations at the fix instants against 2 s differences of
    # speed gave a factor of 0.71 on a correct log.
    s = synth.generate_session(n_laps=1, lap_variation=0.0, sample_rate_hz=20.0,
                               gps_rate_hz=1.0, seed=8)  # fmt: skip
    path = tmp_path / "gps1.csv"
    path.write_text(synth.session_csv_text(s), encoding="utf-8")
    log = logfile.read_log(path)
    assert unit_checks.check_units(log) == []
    # the factors themselves, not only inside the 1.4 band: 1 within the slip angle and
    # course-rate error the module allows for (5 %; measured 0.998, 0.961, 0.965 where
    # the channels at the fix instants gave 0.725, 0.829, 0.853)
    ref = unit_checks._gnss_path(log)
    for name in ("accel_lon", "accel_lat", "yaw_rate"):
        assert unit_checks._channel_factor(log, ref, name) == pytest.approx(1.0, abs=0.05)


# -------------------------------------------------------------------------- the rates


@pytest.mark.parametrize("rate_hz", [100.0, 20.0, 10.0, 5.0])
def test_filtered_noise_is_measured_at_any_rate(rate_hz):
    # White noise of 0.3 m/s² on a slow manoeuvre: the filtered noise the fit takes out
    # must be the standard deviation of the noise alone through the same low-pass
    # (scipy's gaussian_filter1d); at 5 Hz the 3 Hz kernel is narrower than a sample and
    # the noise is all left. 5 %: the MAD's scatter over 20,000 samples and the
    # manoeuvre's own second differences.
    rng = np.random.default_rng(3)
    t = np.arange(20_000) / rate_hz
    noise = 0.3 * rng.standard_normal(t.size)
    ax = 6.0 * np.sin(2 * np.pi * 0.05 * t) + noise
    sel = samples.select_samples(np.full(t.size, 40.0), ax, ax.copy(), sample_rate_hz=rate_hz)
    sigma = samples.gaussian_sigma_samples(3.0, rate_hz)
    expected = float(np.std(gaussian_filter1d(noise, sigma)))
    assert sel.noise_m_s2 == pytest.approx(expected, rel=0.05)


def test_dropout_bridging_depends_on_the_inertial_channels(tmp_path):
    # A 3 s gap: bridged by dead reckoning with a yaw rate, not along the chord alone.
    from tests.synthetic_logs import Circle, csv_text

    circle = Circle(duration_s=40.0)
    circle.drop_gps(20.0, 23.0)
    with_yaw = logfile.read_log(circle.write(tmp_path / "yaw.csv", planar=True))
    cols = circle.columns(planar=True)
    del cols["yaw_rate [rad/s]"], cols["accel_lat [m/s^2]"]
    path = tmp_path / "bare.csv"
    path.write_text(csv_text(cols, fmt="{:.10f}"), encoding="utf-8")
    bare = logfile.read_log(path)
    (g_yaw,) = gnss.gps_dropouts(with_yaw)
    (g_bare,) = gnss.gps_dropouts(bare)
    assert g_yaw.bridged and not g_bare.bridged
    assert gnss.bridge_limit_s(with_yaw) == gnss.BRIDGE_INERTIAL_MAX_S
    assert gnss.bridge_limit_s(bare) == gnss.BRIDGE_MAX_S


def test_gps_only_at_2_hz_says_how_uncertain_the_minimum_speeds_are(tmp_path):
    # Time, position and speed only, fixes at 2 Hz: the warning names the rate, the
    # missing channels and a figure in km/h; the figure is of the size the line's own
    # minimum speeds are off by against the generator's ideal on the true line (the
    # true car on the rebuilt line).
    from limitlap import solve

    s = synth.generate_session(n_laps=1, lap_variation=0.0, sample_rate_hz=10.0,
                               gps_rate_hz=2.0, seed=9)  # fmt: skip
    path = tmp_path / "gps2.csv"
    path.write_text(
        synth.session_csv_text(s, columns=["latitude", "longitude", "altitude", "speed"]),
        encoding="utf-8",
    )
    log, found, _, _ = pipeline.load_session(path, gate=laps.Gate.geodetic(*s.truth.gate_latlon))
    dl = driven.reconstruct_lap(log, laps.fastest_lap(found))
    (line,) = [w for w in dl.warnings if "minimum speeds are uncertain" in w]
    assert "GPS at 2 Hz with no yaw rate or lateral acceleration" in line
    doubt = float(np.median(dl.agreement["rate_limits"]["min_speed_kmh"]))
    # the corners' minimum speeds of the ideal on this line against the truth's
    ideal = solve.solve_profile(dl.line, s.truth.vehicle)
    scale = s.truth.line.length_m / dl.line.length_m
    errors = []
    for c in s.truth.circuit.corners:
        near = np.abs(dl.line.distance_m * scale - c.apex_m) < 30.0
        near_true = np.abs(s.truth.line.distance_m - c.apex_m) < 30.0
        v_line = ideal.speed_m_s[near].min()
        v_true = s.truth.ideal_profile.speed_m_s[near_true].min()
        errors.append(abs(v_line - v_true) / KMH_TO_M_S)
    # same order of magnitude: within a factor of 3 either way of the median error
    assert doubt / 3.0 < float(np.median(errors)) < 3.0 * doubt
