"""How sure: the bands on the ideal lap time and on each corner's time left.

The coverage check runs generated sessions of the invented demo circuit
(:func:`limitlap.synth.generate_session`) whose truth is the generator's: the ideal on the
true line with the true car, and each corner's true time left between the physical corner
bounds (tests/generated_truth.py). The pieces are checked against closed forms: the
Student t prediction interval and the quantile rank the envelope fit uses.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from limitlap import bands, best_laps, laps, outputs, pipeline, synth
from limitlap.formatting import with_band
from limitlap.resources import bundled_path

from .generated_truth import physical_corners, true_corner_times

TRACK = bundled_path("demo_tracks", "tarrowby_heath.toml")


def test_line_draws_predict_a_new_line_at_the_stated_coverage():
    # Closed form: for n draws from a normal population, a new draw falls inside the
    # Student t prediction interval mean ± t(n-1) s sqrt(1 + 1/n) with its stated
    # probability (Hahn & Meeker 1991, ch. 4). 600 samples of n = 4 lines each, 2000 draws
    # apiece: the 90 % band holds the new value 90 % of the time, within 3 binomial
    # standard errors (3.7 points at 600 trials; the draws' own Monte Carlo error is
    # smaller).
    rng = np.random.default_rng(5)
    hits = 0
    trials = 600
    for _ in range(trials):
        lines = rng.normal(0.0, 1.0, size=(4, 2))
        draws = bands._line_predictive(lines, rng, 2000) + lines.mean(axis=0)
        lo, hi = np.percentile(draws[:, 0], [5.0, 95.0])
        hits += lo <= rng.normal(0.0, 1.0) <= hi
    assert hits / trials == pytest.approx(0.90, abs=0.04)
    # resampling the four lines themselves would have covered (n-1)/(n+1) = 60 %


def test_level_draws_are_the_quantile_rank_of_the_resampled_laps():
    # Definition (the envelope fit's boundary statistic): in each resample, the sample at
    # rank rint(q (N - 1)) counted from the bottom of the group's samples, every lap's
    # samples repeated as often as the lap was drawn; the level is its ratio to the full
    # sample's. Checked by building each resample's samples and sorting them.
    rng = np.random.default_rng(9)
    n_laps, q = 6, 0.99
    k = rng.normal(1.0, 0.02, size=6000)
    lap = rng.integers(0, n_laps, size=k.size)
    group = np.zeros(k.size, dtype=int)  # all braking
    weights = rng.multinomial(n_laps, np.full(n_laps, 1 / n_laps), size=40).astype(np.int32)
    got = bands._level_draws(k, group, lap, n_laps, weights, q)[:, 0]
    full = np.sort(k)[round(q * (k.size - 1))]
    for w, level in zip(weights, got, strict=True):
        pool = np.sort(np.concatenate([np.repeat(k[lap == i], w[i]) for i in range(n_laps)]))
        rank = pool.size - 1 - round((1 - q) * (pool.size - 1))
        assert level == pytest.approx(pool[rank] / full, abs=1e-12)
    assert np.all(bands._level_draws(k, group, lap, n_laps, np.ones((2, n_laps), np.int32), q) == 1)


def test_no_advice_where_the_band_includes_zero():
    said = "T6: 0.02 s — the ideal brakes 3 m later"
    assert bands.advice_shown("T6", 0.02, (0.05, 0.09), said) == said
    note = bands.advice_shown("T6", 0.02, (-0.01, 0.05), said)
    assert note == "T6: 0.02 ± 0.03 s — within the uncertainty, no advice"
    assert with_band(0.02, (-0.01, 0.06)) == "0.02 ± 0.04 s"  # the larger side, rounded up


@pytest.fixture(scope="module")
def demo_analysis():
    return pipeline.analyse(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"), track=TRACK)


def test_bands_in_summary_and_the_ranking(demo_analysis, tmp_path):
    a = demo_analysis
    b = a.bands
    assert b.coverage == 0.9 and b.n_resamples == bands.N_RESAMPLES and b.n_laps == 7
    lo, hi = b.ideal_time_band_s
    assert lo < a.ideal.lap_time_s < hi
    outputs.write_outputs(a, tmp_path / "out", figures=False)
    summary = json.loads((tmp_path / "out" / "summary.json").read_text(encoding="utf-8"))
    assert summary["ideal"]["band_coverage"] == 0.9
    assert summary["ideal"]["time_band_s"] == pytest.approx([lo, hi])
    for c, band in zip(summary["corners"], b.corner_bands_s, strict=True):
        assert c["time_left_band_s"] == pytest.approx(list(band))
        if band[0] <= 0.0 <= band[1]:
            assert c["advice"].endswith("within the uncertainty, no advice")
    # the planted early brake into T1 (0.48 s, the demo's truth) stands apart from the rest
    ranked = a.comparison.ranked()
    groups = dict(zip([c.name for c in a.comparison.corners], b.rank_group, strict=True))
    assert ranked[0].name == "T1" and list(groups.values()).count(groups["T1"]) == 1


def _true_left(session, analysis):
    """The generator's time left in each analysed corner, and its ideal lap time. [s]."""
    tr = session.truth
    places = physical_corners(analysis.corners, analysis.driven, session, analysis.lap.number)
    actual = true_corner_times(session, analysis.lap.number, places)
    ideal = tr.ideal_profile
    ideal_c = best_laps.segment_times(
        ideal.distance_m, tr.line.length_m, ideal.time_s, ideal.lap_time_s, places
    )
    return actual - ideal_c, tr.ideal_lap_time_s


@pytest.mark.slow
def test_bands_hold_the_truth_at_their_coverage(tmp_path):
    # Source: generated sessions with known truth (30 seeds, four flying laps each, the
    # demo's planted mistakes and lap-to-lap variation); the stated coverage is 90 % and
    # the coverage found must be within 10 points of it (the task's), for the ideal lap
    # time and for the corners' time left. Found when written: ideal 0.90 (27 of 30),
    # corners 0.85 (of 360); with the envelope 0.11 s slow (the low-pass's shrink left
    # in, docs/methods.md, Envelope fit) 0.40 and 0.75; with it given back 0.93 (28 of
    # 30) and 0.90; docs/methods.md, How sure.
    hits_ideal, hits_corner = [], []
    for seed in range(100, 130):
        session = synth.generate_session(n_laps=4, seed=seed)
        path = tmp_path / f"s{seed}.csv"
        path.write_text(synth.session_csv_text(session), encoding="utf-8")
        gate = laps.Gate.geodetic(*session.truth.gate_latlon)
        a = pipeline.analyse(path, gate=gate, track=TRACK)
        true_left, true_ideal = _true_left(session, a)
        lo, hi = a.bands.ideal_time_band_s
        hits_ideal.append(lo <= true_ideal <= hi)
        hits_corner += [
            lo_c <= t <= hi_c
            for (lo_c, hi_c), t in zip(a.bands.corner_bands_s, true_left, strict=True)
        ]
    print(f"coverage: ideal {np.mean(hits_ideal):.2f}, corners {np.mean(hits_corner):.2f}")
    assert abs(np.mean(hits_ideal) - 0.9) <= 0.10
    assert abs(np.mean(hits_corner) - 0.9) <= 0.10
