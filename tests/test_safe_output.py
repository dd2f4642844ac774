"""Safe output: inputs never change, an interrupted write leaves the earlier
result whole, and the same inputs give byte-identical summary.json."""

from __future__ import annotations

import os

import pytest

from limitlap import atomic

from .robust_data import (
    VEHICLE_TOML,
    demo_csv,
    demo_gate,
    digest,
    digests,
    run_cli,
    square_line_csv,
)


@pytest.fixture
def cli(capsys, monkeypatch):
    def run(*args):
        code, out, err = run_cli(args, capsys, monkeypatch)
        assert code == 0, err
        return out

    return run


@pytest.fixture
def inputs(tmp_path):
    files = {
        "log": tmp_path / "session.csv",
        "vehicle": tmp_path / "car.toml",
        "mass_only": tmp_path / "mass.toml",
        "line": tmp_path / "line.csv",
        "channels": tmp_path / "map.toml",
        "track": tmp_path / "track.toml",
    }
    # The log under other column names, so the channel map is really used.
    files["log"].write_text(demo_csv(2).replace("speed [km/h]", "GPS Speed [km/h]", 1))
    files["vehicle"].write_text(VEHICLE_TOML)
    files["mass_only"].write_text('name = "mass only"\nmass_kg = 1300.0\n')
    files["line"].write_text(square_line_csv())
    files["channels"].write_text('[channels.speed]\ncolumn = "GPS Speed"\n')
    lat, lon = demo_gate().split(",")
    files["track"].write_text(f'name = "invented"\n[gate]\nlatitude = {lat}\nlongitude = {lon}\n')
    for path in files.values():
        os.chmod(path, 0o444)  # read-only (root ignores the bits: the hashes check)
    return files


def test_inputs_unchanged_by_every_command(tmp_path, cli, inputs):
    before = {name: digest(path) for name, path in inputs.items()}
    log, ch, trk = inputs["log"], inputs["channels"], inputs["track"]
    cli("laps", log, "--channels", ch, "--track", trk, "--json")
    cli("solve", inputs["line"], "--vehicle", inputs["vehicle"], "--json")
    cli(
        "analyse",
        log,
        "--channels",
        ch,
        "--track",
        trk,
        "--vehicle",
        inputs["mass_only"],
        "--out",
        tmp_path / "a",
        "--no-figures",
        "--quiet",
    )
    cli(
        "targets",
        inputs["line"],
        "--vehicle",
        inputs["vehicle"],
        "--grip",
        "dry",
        "--grip",
        "0.7",
        "--json",
    )
    after = {name: digest(path) for name, path in inputs.items()}
    assert after == before


@pytest.mark.slow
def test_same_inputs_give_byte_identical_summary(tmp_path, cli, inputs):
    log, ch, trk = inputs["log"], inputs["channels"], inputs["track"]
    for out in ("first", "second"):
        cli(
            "analyse",
            log,
            "--channels",
            ch,
            "--track",
            trk,
            "--out",
            tmp_path / out,
            "--no-figures",
            "--quiet",
        )
    first = (tmp_path / "first" / "summary.json").read_bytes()
    assert first == (tmp_path / "second" / "summary.json").read_bytes()
    for name in ("profile.csv", "envelope.toml"):
        assert (tmp_path / "first" / name).read_bytes() == (tmp_path / "second" / name).read_bytes()


@pytest.mark.slow
def test_interrupted_write_leaves_the_earlier_result_whole(
    tmp_path, cli, inputs, capsys, monkeypatch
):
    log, ch, trk = inputs["log"], inputs["channels"], inputs["track"]
    out = tmp_path / "out"
    cli("analyse", log, "--channels", ch, "--track", trk, "--out", out, "--no-figures", "--quiet")
    before = digests(out)
    assert {"summary.json", "report.html", "envelope.toml", "profile.csv"} <= set(before)

    # A later run at another grip scale (different results) dies half way through
    # writing its first file: the bytes reach the temporary file, then the disk fails.
    calls = []

    def failing_fsync(fd):
        calls.append(fd)
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(atomic.os, "fsync", failing_fsync)
    code, _, err = run_cli(
        [
            "analyse",
            log,
            "--channels",
            ch,
            "--track",
            trk,
            "--grip",
            "0.7",
            "--out",
            out,
            "--no-figures",
            "--quiet",
        ],
        capsys,
        monkeypatch,
    )
    monkeypatch.undo()
    assert calls  # the failure did happen inside a write
    assert code == 2
    assert (
        err.strip() == f"limitlap: error: {out}: cannot write summary.json: No space left on device"
    )
    assert digests(out) == before  # every earlier file byte-identical, no temp file left
