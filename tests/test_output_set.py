"""An output folder is one run's set: swapped in whole, never mixed, never half replaced."""

from __future__ import annotations

import dataclasses
import os
import threading

import numpy as np
import pytest

from limitlap import atomic, figures, outputs, sheets
from limitlap.errors import InputError

from . import test_report as tr

RUNS = 20  # repetitions of the race; each one is a fresh chance to interleave


@pytest.fixture(scope="module")
def two_runs():
    """Two analyses whose every output file differs (log, grip scale, car name, speeds)."""
    a = tr.make_analysis()
    driven = dataclasses.replace(a.driven, speed_m_s=np.asarray(a.driven.speed_m_s) * 1.001)
    b = dataclasses.replace(
        a,
        log_path="sessions/invented_other.csv",
        grip_scale=0.9,
        vehicle=dataclasses.replace(a.vehicle, name="other car"),
        driven=driven,
    )
    return a, b


def _contents(folder):
    return {p.name: p.read_bytes() for p in folder.iterdir() if p.is_file()}


@pytest.fixture(scope="module")
def references(two_runs, tmp_path_factory):
    """Each run's set written alone: what a whole set of either run holds."""
    refs = []
    for i, analysis in enumerate(two_runs):
        folder = tmp_path_factory.mktemp("reference") / f"run{i}"
        outputs.write_outputs(analysis, folder, figures=False)
        files = _contents(folder)
        files.pop(atomic.SET_MANIFEST)  # its run id differs on every run
        refs.append(files)
    a, b = refs
    assert a.keys() == b.keys()
    for name in a:  # every file tells the runs apart, so a mixed set cannot hide
        assert a[name] != b[name], name
    return refs


def _leftovers(parent, name):
    return sorted(p.name for p in parent.iterdir() if p.name.startswith(f".{name}."))


def test_concurrent_runs_never_leave_a_mixed_set(tmp_path, two_runs, references):
    out = tmp_path / "out"
    for _ in range(RUNS):
        start = threading.Barrier(2)
        errors = []

        def run(analysis, start=start, errors=errors):
            start.wait()
            try:
                outputs.write_outputs(analysis, out, figures=False)
            except Exception as err:  # pragma: no cover - reported below
                errors.append(err)

        threads = [threading.Thread(target=run, args=(x,)) for x in two_runs]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert not errors, errors
        files = _contents(out)
        files.pop(atomic.SET_MANIFEST)
        assert files in references, "the folder holds files of both runs"
        assert _leftovers(tmp_path, "out") == []  # no fresh or earlier folder left beside


def test_failed_run_leaves_the_earlier_set_whole(tmp_path, two_runs, monkeypatch):
    a, b = two_runs
    out = tmp_path / "out"
    outputs.write_outputs(a, out)
    before = _contents(out)

    def broken(*args, **kwargs):
        raise RuntimeError("drawing failed")

    # summary.json, profile.csv and envelope.toml of the second run are written by then
    monkeypatch.setattr(figures, "time_left_figure", broken)
    with pytest.raises(RuntimeError, match="drawing failed"):
        outputs.write_outputs(b, out)
    assert _contents(out) == before
    assert _leftovers(tmp_path, "out") == []


def test_analysis_and_sheets_in_one_set(tmp_path, two_runs):
    # As `limitlap demo` writes them: both into one set, swapped in once.
    out = tmp_path / "out"
    (out / "targets_old.pdf").parent.mkdir()
    (out / "targets_old.pdf").write_bytes(b"%PDF of an earlier version's run")
    with atomic.output_set(out) as folder:
        outputs.write_outputs(two_runs[0], folder, figures=False)
        sheets.write_target_sheets(tr._conditions(), folder, "Invented Ring")
        assert not (out / "summary.json").exists()  # nothing shows before the swap
    names = set(_contents(out))
    assert {"summary.json", "report.html", "targets.csv", "targets_dry.pdf"} <= names
    assert "targets_old.pdf" not in names  # the earlier set went whole
    listed = set(atomic.json.loads((out / atomic.SET_MANIFEST).read_text())["files"])
    assert listed | {atomic.SET_MANIFEST} == names


def test_folder_with_other_files_is_refused_untouched(tmp_path, two_runs):
    out = tmp_path / "results"
    out.mkdir()
    (out / "notes.txt").write_text("mine\n")
    with pytest.raises(InputError, match=r"results: holds files limitlap did not write \(notes"):
        outputs.write_outputs(two_runs[0], out, figures=False)
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]
    assert _leftovers(tmp_path, "results") == []


@pytest.mark.skipif(os.name != "posix", reason="POSIX file modes")
def test_new_folder_has_the_usual_mode(tmp_path, two_runs):
    out = tmp_path / "out"
    outputs.write_outputs(two_runs[0], out, figures=False)
    umask = os.umask(0)
    os.umask(umask)
    assert out.stat().st_mode & 0o777 == 0o777 & ~umask


def test_file_put_in_during_the_run_is_kept(tmp_path, two_runs):
    # Someone saves a file into the folder while a run writes: the run is refused at the
    # swap and the folder stays as it was, the new file with it.
    a, b = two_runs
    out = tmp_path / "out"
    outputs.write_outputs(a, out, figures=False)
    before = _contents(out)

    def drop_a_file(done, total, step):
        if step == "summary.json":
            (out / "notes.txt").write_text("mine\n")

    with pytest.raises(InputError, match=r"out: holds files limitlap did not write \(notes"):
        outputs.write_outputs(b, out, figures=False, progress=drop_a_file)
    assert _contents(out) == {**before, "notes.txt": b"mine\n"}
    assert _leftovers(tmp_path, "out") == []
