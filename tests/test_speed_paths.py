"""Shortcuts taken for speed give the answers of the slower paths they replace.

- the boundary-point kernel (selection instead of a full sort per bin) picks exactly the
  sample ``numpy.lexsort`` ranks, ties included;
- the lap timelines (time against distance integrated from the logged speed) that
  best-of-laps uses for the laps whose line is not rebuilt reproduce the generator's
  true time at each distance fraction.
"""

from __future__ import annotations

import numpy as np
import pytest

from limitlap import _kernels, compare, ingest, pipeline, synth
from limitlap.laps import Gate, split_laps


def _lexsort_reference(key, rho, rank):
    """The sample of rank ``rank[g]`` in each group ordered by (rho, index): numpy only."""
    order = np.lexsort((rho, key))
    out = np.full(rank.shape[0], -1, np.int64)
    keys, start = np.unique(key[order], return_index=True)
    for k, s in zip(keys, start, strict=True):
        if rank[k] >= 0:
            out[k] = order[s + rank[k]]
    return out


@pytest.mark.parametrize("ties", [False, True])
def test_boundary_kernel_matches_lexsort(ties):
    # Exact equality: both pick one index by the same total order (rho, then index).
    rng = np.random.default_rng(7)
    for _ in range(40):
        n, groups = int(rng.integers(1, 3000)), int(rng.integers(1, 40))
        key = rng.integers(0, groups, n).astype(np.int64)
        rho = rng.random(n)
        if ties:  # only 11 distinct values: many equal radii in a bin
            rho = np.round(rho * 10.0) / 10.0
        count = np.bincount(key, minlength=groups)
        rank = np.where(count >= 2, np.rint(rng.random(groups) * (count - 1)), -1).astype(np.int64)
        got = _kernels.boundary_points(key, rho, rank)
        assert np.array_equal(got, _lexsort_reference(key, rho, rank))


@pytest.fixture(scope="module")
def session_and_log(tmp_path_factory):
    session = synth.generate_session(n_laps=3, seed=21)
    path = tmp_path_factory.mktemp("timeline") / "s.csv"
    path.write_text(synth.session_csv_text(session), encoding="utf-8")
    return session, ingest.read_log(path)


def test_lap_timelines_follow_true_time_against_distance(session_and_log):
    session, log = session_and_log
    truth = session.truth
    laps = [lp for lp in split_laps(log, Gate.geodetic(*truth.gate_latlon)) if lp.complete]
    timelines = pipeline.lap_timelines(log, laps)
    assert len(timelines) == len(laps) == len(truth.lap_times_s)
    t = session.time_s
    fractions = np.linspace(0.05, 0.95, 19)
    for lp in laps:
        tl = timelines[lp.number]
        assert np.all(np.diff(tl.distance_m) > 0) and tl.distance_m[0] == 0.0
        assert tl.lap_time_s == lp.time_s
        # the generator's truth: elapsed time when the car reached each fraction of the lap
        inside = (t > lp.start_time_s) & (t < lp.end_time_s)
        s0, s1 = np.interp([lp.start_time_s, lp.end_time_s], t, truth.distance_m)
        true_t = np.interp(fractions * (s1 - s0), truth.distance_m[inside] - s0, t[inside])
        got_t = np.interp(fractions * tl.length_m, tl.distance_m, tl.time_s) + lp.start_time_s
        # Speed noise 0.05 m/s (generator default) integrates to centimetres of distance
        # over a lap, about a millisecond at 30-80 m/s (1.5 ms at most measured here with
        # seed 21); 5 ms leaves room for other seeds. A timeline off by one 100 Hz row
        # (10 ms) fails.
        assert got_t == pytest.approx(true_t, abs=5e-3)


def test_best_of_laps_takes_timelines(session_and_log):
    # best_of_laps on timelines equals segment_times on the same arrays (its definition).
    session, log = session_and_log
    laps = [lp for lp in split_laps(log, Gate.geodetic(*session.truth.gate_latlon)) if lp.complete]
    timelines = list(pipeline.lap_timelines(log, laps).values())
    ref = timelines[0]
    seg = [(0.0, 0.3), (0.3, 0.7), (0.7, 1.0)]
    corners = [_Segment(a * ref.length_m, b * ref.length_m, f"S{i}") for i, (a, b) in enumerate(seg)]
    best = compare.best_of_laps(timelines, corners, reference_length_m=ref.length_m)
    for row, tl in zip(best.segment_times_s, timelines, strict=True):
        expect = compare.segment_times(
            tl.distance_m, tl.length_m, tl.time_s, tl.lap_time_s, corners, tl.length_m / ref.length_m
        )
        assert np.array_equal(row, expect)
        # three segments tile the lap: they add up to its time (rounding only)
        assert row.sum() == pytest.approx(tl.lap_time_s, abs=1e-9)


class _Segment:
    """Just the fields best_of_laps and segment_times read from a corner."""

    def __init__(self, start_m, end_m, name):
        self.start_m, self.end_m, self.name = start_m, end_m, name
