"""Fixed-margin layout of the report figures: nothing drawn outside the figure, the caller's
matplotlib settings untouched, figures drawn from threads identical to serial ones."""

from __future__ import annotations

import threading

import numpy as np
import pytest

from limitlap import figures

matplotlib = pytest.importorskip("matplotlib")

# An invented 1 km lap with two corners; names long enough to need measured margins.
S = np.arange(0.0, 1000.0, 2.0)
V_IDEAL = 40.0 + 15.0 * np.cos(2 * np.pi * S / 500.0)
V_REAL = V_IDEAL - 2.0 * np.exp(-(((S - 300.0) / 40.0) ** 2))
LONG = [
    {"name": "Long Heath Hairpin", "start_m": 200.0, "apex_m": 300.0, "end_m": 380.0},
    {"name": "Second Long Kink", "start_m": 600.0, "apex_m": 700.0, "end_m": 800.0},
]
for i, c in enumerate(LONG):
    c.update(time_left_s=0.3 - 0.2 * i, actual_s=10.0 + i, ideal_s=9.7 + i, best_s=9.8 + i)


def drawn_texts(fig):
    """(text, pixel box) of every text the figure's canvas drew (boxes from the top left)."""
    return [(t, bb) for t, bb in fig.texts if t.strip()]


@pytest.fixture
def captured(monkeypatch):
    """Canvases handed to _png, so the test can measure their texts."""
    figs = []
    real_png = figures._png

    def keep(fig, kind):
        data = real_png(fig, kind)
        figs.append(fig)
        return data

    monkeypatch.setattr(figures, "_png", keep)
    return figs


@pytest.mark.parametrize(
    "draw",
    [
        lambda: figures.speed_figure(S, V_REAL, V_IDEAL, LONG),
        # a delta in milliseconds: six-character tick labels ("-0.010") need a wider margin
        lambda: figures.delta_figure(S, 2e-5 * S - 0.01, LONG),
        lambda: figures.time_left_figure(LONG),
        lambda: figures.best_figure(LONG, 20.0, 19.8, 19.4, lap_label="lap 12 of the session"),
        lambda: figures.map_figure(
            100 * np.cos(2 * np.pi * S / 1000),
            60 * np.sin(2 * np.pi * S / 1000),
            np.gradient(2e-5 * S),
            LONG,
            S,
        ),
    ],
    ids=["speed", "delta", "time_left", "best", "map"],
)
def test_every_text_lies_inside_the_figure(captured, draw):
    # Half a pixel: the renderer's text boxes are snapped to whole pixels.
    draw()
    (fig,) = captured
    w, h = fig.width, fig.height
    for text, bb in drawn_texts(fig):
        assert bb.x0 >= -0.5 and bb.y0 >= -0.5, text
        assert bb.x1 <= w + 0.5 and bb.y1 <= h + 0.5, text


def test_map_names_stay_inside_the_map(captured):
    figures.map_figure(
        100 * np.cos(2 * np.pi * S / 1000),
        60 * np.sin(2 * np.pi * S / 1000),
        np.gradient(2e-5 * S),
        LONG,
        S,
    )
    (fig,) = captured
    box = fig.panels[0].box
    names = dict(drawn_texts(fig))
    for c in LONG:
        bb = names[c["name"]]
        # 0.5 px: pixel snapping of the text box, as above
        assert box.x0 - 0.5 <= bb.x0 and bb.x1 <= box.x1 + 0.5, c["name"]
        assert box.y0 - 0.5 <= bb.y0 and bb.y1 <= box.y1 + 0.5, c["name"]


def test_caller_settings_untouched():
    before = matplotlib.rcParams.copy()
    figures.time_left_figure(LONG)
    after = matplotlib.rcParams.copy()
    assert {k for k in before if before[k] != after[k]} == set()


def test_threads_draw_the_same_png_as_serial():
    # Threads (a Dask worker's) share one rcParams: overlapping style contexts would leave
    # the figures' style behind in the caller's settings, or a figure half unstyled.
    serial = figures.speed_figure(S, V_REAL, V_IDEAL, LONG)
    before = matplotlib.rcParams.copy()
    out = [None] * 4

    def draw(i):
        out[i] = figures.speed_figure(S, V_REAL, V_IDEAL, LONG)

    threads = [threading.Thread(target=draw, args=(i,)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert all(png == serial for png in out)
    after = matplotlib.rcParams.copy()
    assert {k for k in before if before[k] != after[k]} == set()
