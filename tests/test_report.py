"""Tests of outputs.py, report.py and sheets.py: files written whole, report self-contained, PNGs real.

The analysis fixture is built from the project's own solver on an invented closed line: the
"driven" lap is the solver at a lower grip with speed caps planted in three corners, the
ideal is the solver at grip 1. Namespaces mimic the pipeline contract (TEAM.md).
"""

from __future__ import annotations

import dataclasses
import html.parser
import json
import os
import re
import struct
import subprocess
import sys
import tomllib
import zlib
from pathlib import Path

import numpy as np
import pytest

from limitlap import atomic, best_laps, compare, figures, gg, outputs, report, sheets, targets
from limitlap import corners as corners_mod
from limitlap.driven import DrivenLap
from limitlap.envelope import EnvelopeFit
from limitlap.errors import InputError
from limitlap.ingest import read_vehicle
from limitlap.laps import Lap
from limitlap.line import line_from_xy
from limitlap.pipeline import Analysis
from limitlap.solve import solve_profile
from limitlap.units import BAR_TO_PA
from limitlap.vehicle import Vehicle

# --------------------------------------------------------------------------- fixture

CAR = Vehicle(
    "Invented test saloon",
    mass_kg=1050.0,
    power_w=125e3,
    drag_area_m2=0.68,
    downforce_area_m2=0.35,
    rolling_coeff=0.013,
    mu_lat=1.15,
    mu_brk=1.2,
    mu_trac=1.05,
    exponent=2.0,
)


def _loop_xy():
    """An invented closed loop (about 2.1 km) with several corners of different radius."""
    th = np.linspace(0.0, 2 * np.pi, 400, endpoint=False)
    r = 330.0 + 70.0 * np.cos(2 * th) + 45.0 * np.sin(3 * th) + 20.0 * np.cos(5 * th)
    return r * np.cos(th), 0.7 * r * np.sin(th)


def _lap(line, grip_scale, slow_corners, corners, ideal, time_offset_s):
    """A "driven" lap: the solver at a lower grip, capped near the apex of some corners."""
    cap = np.full(line.n, np.inf)
    for j, share in slow_corners.items():
        near = np.abs(line.distance_m - corners[j].apex_m) < 50.0
        cap[near] = np.min(ideal.speed_m_s[near]) * share
    real = solve_profile(line, CAR, grip_scale, speed_cap_m_s=cap)
    return DrivenLap(
        line=line,
        time_s=real.time_s + time_offset_s,  # log time of the lap's stations
        lap_time_s=real.lap_time_s,
        speed_m_s=real.speed_m_s,
        accel_lon_m_s2=real.accel_lon_m_s2,
        accel_lat_m_s2=real.accel_lat_m_s2,
        yaw_rate_rad_s=real.accel_lat_m_s2 / real.speed_m_s,
        throttle=np.clip(real.accel_lon_m_s2 / 3.0, 0.0, 1.0),
        brake_pa=np.clip(-real.accel_lon_m_s2, 0.0, None) * 8.0 * BAR_TO_PA,
        gear=np.full(line.n, np.nan),
        agreement={"rms_1_m": 0.0004},
        warnings=["GPS dropout of 2.1 s bridged on lap 3 at 812 m"],
    )


def make_analysis():
    """A pipeline.Analysis look-alike from the project's solver and comparison."""
    x, y = _loop_xy()
    line = line_from_xy(x, y, spacing_m=2.0)
    ideal = solve_profile(line, CAR)
    corners = corners_mod.find_corners(line)
    planted = {0: 0.86, 2: 0.9, 3: 0.92}  # lower minimum speeds in three corners
    driven = _lap(line, 0.95, planted, corners, ideal, 431.7)
    other = _lap(line, 0.97, {0: 0.95, 2: 0.8}, corners, ideal, 500.0)
    comparison = compare.compare_lap(driven, ideal, CAR, corners, grip_estimate=0.95)
    best = best_laps.best_of_laps(
        [driven, other], corners, reference_length_m=line.length_m, lap_numbers=[3, 4], ideal=ideal
    )
    fit = EnvelopeFit(
        vehicle=CAR,
        quality={"n_used": 812, "rms_residual_m_s2": 0.21},
        uncertainty={"mu_lat": 0.012, "mu_brk": 0.02},
        bands=(),
        used=np.ones(812, dtype=bool),
        fitted=("mu_lat", "mu_brk"),
        warnings=["few samples near the limit above 150 km/h"],
    )

    def lap_record(k):
        t0 = 431.7 + 90.0 * (k - 3)
        time_s = driven.lap_time_s if k == 3 else 90.0
        return Lap(k, t0, t0 + time_s, time_s, line.length_m, k > 0, "", 0, 0)

    laps = [lap_record(k) for k in range(5)]
    return Analysis(
        log_path="sessions/invented_dry.csv",
        laps=laps,
        lap=laps[3],
        driven=driven,
        ideal=ideal,
        vehicle=CAR,
        fit=fit,
        grip_scale=1.0,
        grip_estimate=0.95,
        comparison=comparison,
        corners=corners,
        best_of_laps=best,
        warnings=[],
        gg_bands=gg.gg_bands(
            driven.speed_m_s,
            driven.accel_lon_m_s2,
            driven.accel_lat_m_s2,
            CAR,
            asked=(ideal.speed_m_s, ideal.accel_lon_m_s2, ideal.accel_lat_m_s2),
        ),
    )


@pytest.fixture(scope="module")
def analysis():
    return make_analysis()


@pytest.fixture(scope="module")
def written(analysis, tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "out"
    steps = []
    files = outputs.write_outputs(analysis, out, progress=lambda d, t, s: steps.append((d, t, s)))
    return out, files, steps


def _conditions():
    x, y = _loop_xy()
    line = line_from_xy(x, y, spacing_m=2.0)
    corners = corners_mod.find_corners(line)
    return [
        targets.target_table(line, CAR, k, corners, label=lab)
        for lab, k in (("dry", 1.0), ("wet", 0.74))
    ]


# --------------------------------------------------------------------------- helpers


def png_size(data: bytes):
    """Width and height from a PNG's IHDR chunk (PNG spec, ISO/IEC 15948:2004, §11.2.2)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG signature"
    length, kind = struct.unpack(">I4s", data[8:16])
    assert kind == b"IHDR" and length == 13
    w, h = struct.unpack(">II", data[16:24])
    crc = struct.unpack(">I", data[29:33])[0]
    assert crc == zlib.crc32(data[12:29]), "IHDR checksum wrong"
    return w, h


class _TagChecker(html.parser.HTMLParser):
    """Balanced-tag check with the HTML void elements (WHATWG HTML, 13.1.2) left open."""

    VOID = frozenset(
        {
            "area",
            "base",
            "br",
            "col",
            "embed",
            "hr",
            "img",
            "input",
            "link",
            "meta",
            "source",
            "track",
            "wbr",
        }
    )

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.imgs, self.attrs = [], [], [], []

    def handle_starttag(self, tag, attrs):
        self.attrs.extend(attrs)
        if tag == "img":
            self.imgs.append(dict(attrs))
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
        else:
            self.stack.pop()


# --------------------------------------------------------------------------- atomic writes


def test_write_atomic_writes_and_replaces(tmp_path):
    p = tmp_path / "a.txt"
    atomic.write_atomic(p, "one\n")
    atomic.write_atomic(p, b"two\n")
    assert p.read_bytes() == b"two\n"
    assert [q.name for q in tmp_path.iterdir()] == ["a.txt"]  # no temp file left


def test_failed_replace_leaves_previous_file_intact(tmp_path, monkeypatch):
    p = tmp_path / "summary.json"
    p.write_text("previous\n")

    def boom(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(atomic.os, "replace", boom)
    with pytest.raises(InputError, match="No space left"):
        atomic.write_atomic(p, "new\n")
    assert p.read_text() == "previous\n"
    assert [q.name for q in tmp_path.iterdir()] == ["summary.json"]  # temp file removed


def test_interrupted_write_leaves_previous_file_intact(tmp_path, monkeypatch):
    # An interrupt (Ctrl-C) during the write: the earlier file stays, the temp file goes.
    p = tmp_path / "report.html"
    p.write_text("previous\n")

    def interrupt(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr(atomic.os, "fsync", interrupt)
    with pytest.raises(KeyboardInterrupt):
        atomic.write_atomic(p, "new\n")
    assert p.read_text() == "previous\n"
    assert [q.name for q in tmp_path.iterdir()] == ["report.html"]


def test_unwritable_folder_is_one_clear_input_error(tmp_path, analysis):
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("x")
    with pytest.raises(InputError) as err:
        atomic.write_atomic(blocker / "summary.json", "{}")
    assert str(blocker) in str(err.value) and "\n" not in str(err.value)
    with pytest.raises(InputError, match="parent folder does not exist"):
        outputs.write_outputs(analysis, tmp_path / "missing" / "out", figures=False)
    with pytest.raises(InputError, match="is a file"):
        outputs.write_outputs(analysis, blocker, figures=False)


@pytest.mark.skipif(
    os.name != "posix" or os.geteuid() == 0, reason="root ignores folder permissions"
)
def test_read_only_folder_is_input_error(tmp_path):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        with pytest.raises(InputError, match="cannot be written"):
            atomic.write_atomic(ro / "x.json", "{}")
    finally:
        ro.chmod(0o755)


# --------------------------------------------------------------------------- summary.json


def test_summary_json_has_interface_fields_and_tiles(written, analysis):
    out, _, _ = written
    data = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert data["schema"] == "limitlap.summary/1"
    assert list(data)[:6] == ["schema", "lap", "ideal", "time_left_s", "grip_estimate", "corners"]
    assert set(data["lap"]) == {"number", "time_s", "distance_m"}
    assert set(data["ideal"]) == {"time_s", "grip_scale"}
    fields = {
        "name",
        "start_m",
        "apex_m",
        "end_m",
        "actual_s",
        "ideal_s",
        "time_left_s",
        "min_speed_actual_kmh",
        "min_speed_ideal_kmh",
        "brake_start_actual_m",
        "brake_start_ideal_m",
        "grip_used",
    }
    for c in data["corners"]:
        assert fields <= set(c)
    # Tiling (docs/outputs.md, summary.json): corners' time left add up to the lap's. Rounding is 1e-5 s
    # per value (summary rounding), so the sum can differ by at most n * 5e-6 s.
    total = sum(c["time_left_s"] for c in data["corners"])
    assert total == pytest.approx(data["time_left_s"], abs=len(data["corners"]) * 5e-6 + 1e-9)
    # km/h conversion exact by definition (SI brochure): 1 km/h = 1/3.6 m/s.
    c0 = analysis.comparison.corners[0]
    assert data["corners"][0]["min_speed_ideal_kmh"] == pytest.approx(
        c0.min_speed_ideal_m_s * 3.6, abs=0.005
    )
    assert data["warnings"]  # the fixture's dropout and fit warnings are carried through


def test_summary_json_byte_identical_on_two_runs(tmp_path):
    a = outputs.write_outputs(make_analysis(), tmp_path / "one", figures=False)
    b = outputs.write_outputs(make_analysis(), tmp_path / "two", figures=False)
    for key in ("summary", "profile", "envelope", "report"):
        assert a[key].read_bytes() == b[key].read_bytes(), key


def test_summary_json_text_rounds_and_rejects_nothing_silently():
    text = outputs.summary_json_text(
        {
            "x_s": np.float64(1 / 3),
            "y_m": 1 / 3,
            "n": np.int64(4),
            "bad_m": float("nan"),
            "v": [np.float32(0.5)],
        }
    )
    # Times keep full precision (corner times must add up to the lap's, docs/outputs.md, summary.json);
    # distances are rounded to the millimetre.
    assert json.loads(text) == {"x_s": 1 / 3, "y_m": 0.333, "n": 4, "bad_m": None, "v": [0.5]}
    with pytest.raises(Exception, match="unsupported type"):
        outputs.summary_json_text({"thing": object()})


# --------------------------------------------------------------------------- envelope.toml, CSV


def test_envelope_toml_round_trips_through_read_vehicle(tmp_path):
    car = dataclasses.replace(
        CAR,
        name='Fitted "envelope" — ü',
        power_w=123456.789012345,
        mu_lat=1.2345678901234567,
        exponent=1.87654321,
    )
    text = outputs.envelope_toml_text(car, {"quality": {"rms_m_s2": 0.2, "bands": [1, 2]}, "n": 5})
    p = atomic.write_atomic(tmp_path / "envelope.toml", text)
    back = read_vehicle(p)
    for f in dataclasses.fields(Vehicle):
        a, b = getattr(car, f.name), getattr(back, f.name)
        if isinstance(a, float):
            # repr() round-trips exactly; power goes through /1000 and *1000 (1 ulp each).
            assert b == pytest.approx(a, rel=1e-9), f.name
        else:
            assert a == b, f.name
    assert "# Fit of this envelope" in text and "quality.rms_m_s2 = 0.2" in text
    keys = set(tomllib.loads(text)) - {"grip"}
    assert keys == {
        "name",
        "mass_kg",
        "power_kw",
        "drag_area_m2",
        "downforce_area_m2",
        "rolling_coeff",
        "air_density_kg_m3",
    }


def test_written_envelope_reads_back(written):
    out, _, _ = written
    back = read_vehicle(out / "envelope.toml")
    assert back.mu_lat == pytest.approx(CAR.mu_lat, rel=1e-12)  # repr round-trip
    assert back.power_w == pytest.approx(CAR.power_w, rel=1e-12)


def test_profile_csv_headers_units_and_values(written, analysis):
    out, _, _ = written
    lines = (out / "profile.csv").read_text().splitlines()
    header = lines[0].split(",")
    assert header[:6] == [
        "distance [m]",
        "time_actual [s]",
        "time_ideal [s]",
        "time_delta [s]",
        "speed_actual [km/h]",
        "speed_ideal [km/h]",
    ]
    assert len(lines) == analysis.driven.line.n + 1
    row = np.array([float(c) for c in lines[10].split(",")])
    # 8 significant digits in the file: relative error below 5e-8.
    assert row[5] == pytest.approx(analysis.ideal.speed_m_s[9] * 3.6, rel=1e-7)


# --------------------------------------------------------------------------- report.html and PNGs


def test_report_html_is_well_formed_and_self_contained(written):
    out, files, _ = written
    text = (out / "report.html").read_text(encoding="utf-8")
    checker = _TagChecker()
    checker.feed(text)
    checker.close()
    assert checker.errors == [] and checker.stack == [], (checker.errors, checker.stack)
    # Nothing off the machine: the content security policy forbids every load but inline
    # script and style and data: images (W3C CSP Level 3, default-src 'none').
    assert "default-src 'none'" in text
    # Scripts are inline only (no src=), and our own part of the page names no URL: the
    # vendored bundle (its own comments and strings name its project's sites) is cut out
    # first.
    bundle = report.plotly_js()
    assert bundle in text
    ours = text.replace(bundle, "")
    assert not re.search(r"<script[^>]*\bsrc\s*=", ours)
    assert not re.search(r"\b(https?|ftp|wss?):", ours.lower())
    assert not re.search(r"""(src|href)\s*=\s*["']?//""", ours)
    assert "url(" not in ours and "@import" not in ours
    assert all(v.startswith(("data:", "#")) for k, v in checker.attrs if k in ("src", "href"))
    assert report.SAFETY_CAUTION in text.replace("&#x27;", "'")
    for word in ("point mass", "quasi-steady state", "your own line", "Warnings", "GPS dropout"):
        assert word in text
    # every PNG written has its place on the page, named after the file
    pngs = sorted(k for k in files if k.endswith(".png") and not k.startswith("corner_"))
    for name in pngs:
        assert f'data-file="{name}"' in text, name


def test_every_png_is_a_real_png_of_its_figure_size(written, analysis):
    out, files, _ = written
    v = outputs.report_view(analysis)
    cols, specs = report.page_figures(v)
    specs += report.detail_figures(v, cols)
    assert sorted(f"{s.key}.png" for s in specs) == sorted(k for k in files if k.endswith(".png"))
    for s in specs:
        data = (out / f"{s.key}.png").read_bytes()
        # picture(): the page's width for documents, the layout's height plus the title
        assert png_size(data) == (figures.PICTURE_WIDTH_PX, s.layout["height"] + 34), s.key
    import matplotlib.image

    img = matplotlib.image.imread(out / "speed.png")
    assert img[..., :3].std() > 0.05  # not a blank canvas
    assert {"speed.png", "time_delta.png", "map.png", "gg.png", "corner_1.png"} <= set(files)


def test_minimal_analysis_without_fit_best_map_or_pedals(tmp_path):
    # A line given as curvature (no x/y: no map), no envelope fit, no best-of-laps, no
    # throttle or brake channel: the report is still complete for what there is.
    from limitlap.line import line_from_curvature

    full = make_analysis()
    src = full.driven.line
    line = line_from_curvature(src.distance_m, src.curvature_1_m, length_m=src.length_m)
    missing = np.full(line.n, np.nan)  # what the line rebuild gives for an absent channel
    driven = dataclasses.replace(full.driven, line=line, throttle=missing, brake_pa=missing)
    bare = dataclasses.replace(full, driven=driven, fit=None, best_of_laps=None, laps=[])
    files = outputs.write_outputs(bare, tmp_path / "out")
    assert "map.png" not in files and "best_of_laps.png" not in files
    assert {"corner_1.png", "gg.png", "speed.png"} <= set(files)
    text = files["report"].read_text(encoding="utf-8")
    assert 'id="fig-map"' not in text and 'id="fig-best_of_laps"' not in text
    assert 'id="fig-speed"' in text and 'id="laps"' not in text  # no other laps to switch
    summary = json.loads(files["summary"].read_text(encoding="utf-8"))
    assert summary["best_of_laps"]["time_s"] is None


def test_progress_reports_every_step(written):
    _, _, steps = written
    total = steps[0][1]
    assert [d for d, _, _ in steps] == list(range(1, total + 1))
    assert any("figure" in s for _, _, s in steps) and steps[-1][2] == "report.html"


@pytest.mark.slow
def test_importing_report_does_not_import_matplotlib():
    # The page is JSON and the vendored plotly.js: no plotting library on its path.
    code = (
        "import sys, limitlap.report, limitlap.figures, limitlap.outputs; "
        "print(any(m.split('.')[0] in ('matplotlib', 'plotly', 'bokeh') for m in sys.modules))"
    )
    res = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=Path(__file__).parents[1],
    )
    assert res.stdout.strip() == "False"


def test_envelope_boundary_matches_interface_limits_and_solver():
    from limitlap import _kernels, limits
    from limitlap.solve import vehicle_array

    v = 40.0
    ax, ay = limits.envelope_boundary(v, CAR, n_points=101)
    # Pure cornering, braking and driving points are the §3 limits (closed forms on
    # both sides; rel=1e-12 is rounding).
    assert np.max(ay) == pytest.approx(float(limits.lateral_limit_m_s2(v, CAR)), rel=1e-12)
    assert -np.min(ax) == pytest.approx(float(limits.braking_limit_m_s2(v, CAR)), rel=1e-12)
    assert np.max(ax) == pytest.approx(float(limits.driving_limit_m_s2(v, CAR)), rel=1e-12)
    # Every point is where the solver's own kernels put the limit at that lateral demand
    # (kappa = a_y / v^2); the same superellipse evaluated two ways, so 1e-9 m/s² is rounding.
    veh = vehicle_array(CAR)
    half = ay.size // 2
    for a_y, a_x_drive, a_x_brake in zip(ay[:half], ax[:half], ax[half:][::-1], strict=True):
        kappa = a_y / v**2
        assert a_x_drive == pytest.approx(_kernels.drive_accel(kappa, v * v, 0.0, veh), abs=1e-9)
        assert -a_x_brake == pytest.approx(_kernels.brake_decel(kappa, v * v, 0.0, veh), abs=1e-9)


def test_time_loss_rate_of_linear_delta_is_its_slope():
    s = np.arange(0.0, 500.0, 2.0)
    rate = figures.time_loss_rate(s, 0.001 * s + 0.2, closed=False)
    # Linear delta: gradient exact; the moving average keeps it except within a window of the ends.
    assert np.allclose(rate[10:-10], 0.001, rtol=1e-12)


# --------------------------------------------------------------------------- target sheets


@pytest.mark.slow
def test_target_sheets_pdf_png_and_csv(tmp_path):
    conds = _conditions()
    files = sheets.write_target_sheets(conds, tmp_path / "targets", "Invented Ring")
    names = sorted(p.name for p in files)
    assert names == [
        "targets.csv",
        "targets_dry.pdf",
        "targets_dry.png",
        "targets_wet.pdf",
        "targets_wet.png",
    ]
    for p in files:
        data = p.read_bytes()
        if p.suffix == ".png":
            assert png_size(data) == sheets.SHEET_SIZE_PX
        elif p.suffix == ".pdf":
            assert data.startswith(b"%PDF-") and b"%%EOF" in data[-64:]
            assert (
                data.count(b"/Type /Page\n")
                + data.count(b"/Type /Page ")
                + data.count(b"/Type /Page>")
                == 1
            )
    rows = (tmp_path / "targets" / "targets.csv").read_text().splitlines()
    assert rows[0].startswith("condition,grip_scale [-],lap_time [s],corner")
    assert len(rows) == 1 + sum(len(c.corners) for c in conds)
    wet = [r.split(",") for r in rows[1:] if r.startswith("wet,")]
    assert float(wet[0][2]) == pytest.approx(conds[1].lap_time_s, abs=5e-4)  # 3 decimals


@pytest.mark.slow
def test_target_sheet_pdf_is_deterministic():
    cond = sheets._condition(_conditions()[1])
    a = sheets.target_sheet(cond, "Invented Ring", report.SAFETY_CAUTION, fmt="pdf")
    b = sheets.target_sheet(cond, "Invented Ring", report.SAFETY_CAUTION, fmt="pdf")
    assert a == b


@pytest.mark.slow
def test_track_corner_labels_reach_summary_and_report(tmp_path):
    # A track file names its corners ("T4" -> "Kettle Hairpin" on the bundled invented
    # circuit): the labels must reach summary.json (an extra "label" key, docs/outputs.md, summary.json
    # allows more keys) and the report's corner table, and only where the file gives one.
    from limitlap import ingest, pipeline
    from limitlap.resources import bundled_path

    track_file = bundled_path("demo_tracks", "tarrowby_heath.toml")
    track = ingest.read_track(track_file)
    want = {n: lb for n, lb in zip(track.corner_names, track.corner_labels, strict=True) if lb}
    assert want  # the bundled track does label its corners
    a = pipeline.analyse(bundled_path("demo_tracks", "tarrowby_dry.csv.gz"), track=track_file)
    assert a.corner_labels == want
    files = outputs.write_outputs(a, tmp_path / "out", figures=False)
    corners = json.loads(Path(files["summary"]).read_text())["corners"]
    assert corners and all(c.get("label") == want.get(c["name"]) for c in corners)
    page = Path(files["report"]).read_text(encoding="utf-8")
    for c in corners:
        if c.get("label"):
            assert f"{c['name']} {html.escape(c['label'])}" in page


def test_terminal_progress_follows_each_stage(capsys):
    # The analysis reports 6 steps, writing the files 15: one bar, reset to each stage's
    # total, so it never reads 100 % and then counts on (10/6).
    from limitlap import cli

    bar = cli._Progress(False, "log")
    for done in range(1, 7):
        bar(done, 6, "analysis")
    assert bar.bar.total == 6 and bar.bar.n == 6
    for done in range(1, 16):
        bar(done, 15, "files")
    assert bar.bar.total == 15 and bar.bar.n == 15
    bar.close()
    err = capsys.readouterr().err
    shown = [(int(a), int(b)) for a, b in re.findall(r"(\d+)/(\d+) \[", err)]
    assert (15, 15) in shown and all(n <= total for n, total in shown)
