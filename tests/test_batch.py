"""Batches of logs: process pool, Dask cluster, combined table, failures kept to their row.

The reference for every good row is the generator's truth (lap times from the simulated
session's own gate crossings) and, for the batch machinery, the same log analysed alone
in this process: a batch must change nothing but where the work runs.
"""

import csv
import io
import json
import math

import numpy as np
import pytest

from limitlap import batch, pipeline, synth
from tests.robust_data import run_cli

#: Whole-session and multi-process runs: the quick loop leaves them out.
pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    """Two short generated sessions (two flying laps each) and their truths, plus a
    broken log (no position columns)."""
    folder = tmp_path_factory.mktemp("logs")
    truths = {}
    for seed in (1, 2):
        s = synth.generate_session(n_laps=2, seed=seed)
        path = folder / f"run{seed}.csv"
        path.write_text(synth.session_csv_text(s, lap_column=True), encoding="utf-8")
        truths[path.name] = s.truth
    (folder / "broken.csv").write_text("time [s],speed [km/h]\n0,1\n0.01,2\n", encoding="utf-8")
    return folder, truths


def _check_good_row(row, truth):
    assert row.ok, row.error
    # The lap column is the generator's truth: it changes at the first 100 Hz row after
    # each true gate crossing, so a lap time from it is within one row period (10 ms) of
    # the truth's lap time from the crossings themselves.
    assert row.lap_time_s == pytest.approx(truth.lap_times_s[row.lap - 1], abs=0.01)
    assert row.time_left_s == pytest.approx(row.lap_time_s - row.ideal_lap_time_s, abs=1e-9)
    assert row.grip_estimate is not None and 0.8 < row.grip_estimate < 1.2  # dry session, k = 1


def test_pool_batch_matches_single_runs_and_keeps_failures(logs, tmp_path):
    folder, truths = logs
    paths = batch.find_logs([folder])
    assert [p.name for p in paths] == ["broken.csv", "run1.csv", "run2.csv"]  # sorted by name
    seen = []
    rows = batch.run_batch(
        paths,
        tmp_path / "out",
        figures=False,
        workers=2,
        on_done=lambda row, done, total: seen.append((done, total)),
    )
    assert [r.log for r in rows] == [str(p) for p in paths]  # the order given, not finishing order
    assert sorted(seen) == [(1, 3), (2, 3), (3, 3)]
    bad, *good = rows
    assert not bad.ok and "broken.csv" in bad.error and "\n" not in bad.error
    for row in good:
        name = row.log.rsplit("/", 1)[-1]
        _check_good_row(row, truths[name])
        alone = pipeline.analyse(row.log)  # same log, this process, no pool
        assert row.lap == alone.lap.number
        assert row.ideal_lap_time_s == alone.comparison.ideal_lap_time_s
        assert row.time_left_s == alone.comparison.time_left_s
        summary = json.loads((tmp_path / "out" / name[:-4] / "summary.json").read_text())
        assert summary["lap"]["number"] == row.lap
        assert summary["time_left_s"] == pytest.approx(row.time_left_s, abs=1e-5)  # 5 decimals
    assert not (tmp_path / "out" / "broken").exists()


def test_batch_csv_has_one_row_per_log(logs, tmp_path):
    folder, _ = logs
    rows = batch.run_batch(
        [folder / "run1.csv", folder / "broken.csv"], tmp_path, figures=False, workers=1
    )
    table = list(csv.DictReader(io.StringIO(batch.batch_csv_text(rows))))
    assert [r["log"] for r in table] == [str(folder / "run1.csv"), str(folder / "broken.csv")]
    assert float(table[0]["lap time [s]"]) == pytest.approx(
        rows[0].lap_time_s, abs=5e-4
    )  # 3 decimals
    assert table[1]["lap time [s]"] == "" and table[1]["error"] == rows[1].error
    text = batch.format_batch_table(rows)
    assert "1 of 2 logs analysed, 1 failed" in text and "error:" in text


def test_output_folders_and_folder_without_logs(tmp_path):
    names = [p.name for p in batch.output_folders(["a/x.csv", "b/x.csv.gz", "y.CSV"], tmp_path)]
    assert names == ["x", "x-2", "y"]
    (tmp_path / "empty").mkdir()
    with pytest.raises(batch.InputError, match="holds no log"):
        batch.find_logs([tmp_path / "empty"])


def test_cli_several_logs_exit_status_and_single_log_unchanged(logs, tmp_path, capsys, monkeypatch):
    folder, _ = logs
    out = tmp_path / "out"
    code, stdout, err = run_cli(
        [
            "analyse",
            folder / "run1.csv",
            folder / "broken.csv",
            "--out",
            out,
            "--no-figures",
            "--quiet",
            "--workers",
            "1",
        ],
        capsys,
        monkeypatch,
    )
    assert code == 1  # one log failed, the other still written
    assert (out / "run1" / "summary.json").is_file() and (out / "batch.csv").is_file()
    assert "1 of 2 logs analysed, 1 failed" in stdout
    assert "Traceback" not in err
    # A single log keeps today's layout: the files straight in --out.
    single = tmp_path / "single"
    code, stdout, _ = run_cli(
        ["analyse", folder / "run2.csv", "--out", single, "--no-figures", "--quiet"],
        capsys,
        monkeypatch,
    )
    assert code == 0 and (single / "summary.json").is_file() and not (single / "batch.csv").exists()


def test_dask_local_cluster_gives_the_pool_results(logs, tmp_path):
    distributed = pytest.importorskip(
        "dask.distributed",
        reason="Dask not installed (optional extra: pip install 'limitlap[dask]')",
    )
    folder, truths = logs
    paths = [folder / "run1.csv", folder / "broken.csv"]
    local = batch.run_batch(paths, tmp_path / "local", figures=False, workers=1)
    # Threads in this process: fast to start and no spawn of interpreters.
    with distributed.LocalCluster(
        n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None
    ) as cluster:
        rows = batch.run_batch(
            paths, tmp_path / "dask", figures=False, scheduler=cluster.scheduler_address
        )
    good, bad = rows
    _check_good_row(good, truths["run1.csv"])
    assert good.time_left_s == local[0].time_left_s and good.lap == local[0].lap
    assert not bad.ok and bad.error == local[1].error
    assert (tmp_path / "dask" / "run1" / "summary.json").is_file()
    assert math.isnan(bad.lap_time_s) and np.isnan(bad.ideal_lap_time_s)
