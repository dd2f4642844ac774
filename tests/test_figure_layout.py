"""Layout of the PNG pictures: nothing drawn outside the picture, the caller's matplotlib
settings untouched, pictures drawn from threads identical to serial ones."""

from __future__ import annotations

import threading

import pytest

from limitlap import outputs, pictures, report
from tests.test_report import make_analysis

matplotlib = pytest.importorskip("matplotlib")


@pytest.fixture(scope="module")
def drawn():
    v = outputs.report_view(make_analysis())
    cols, specs = report.page_figures(v)
    return cols, specs + report.detail_figures(v, cols)


@pytest.fixture
def captured(monkeypatch):
    """Figures handed to pictures._save, so the test can measure their texts."""
    figs = []
    real_save = pictures._save

    def keep(fig):
        data = real_save(fig)  # draws the figure: its texts have their final places
        figs.append(fig)
        return data

    monkeypatch.setattr(pictures, "_save", keep)
    return figs


@pytest.mark.slow
def test_every_text_lies_inside_the_picture(drawn, captured):
    cols, specs = drawn
    for spec in specs:
        pictures.picture(spec, cols)
        fig = captured[-1]
        renderer = fig.canvas.get_renderer()
        # The box of everything drawn (texts included; tick labels outside an axis's
        # range are not drawn): inside the picture, to half a pixel (the renderer snaps
        # text boxes to whole pixels).
        box = fig.get_tightbbox(renderer)
        half = 0.5 / fig.dpi  # [in]
        w, h = fig.get_size_inches()
        assert box.x0 >= -half and box.y0 >= -half, (spec.key, box)
        assert box.x1 <= w + half and box.y1 <= h + half, (spec.key, box)


def test_caller_settings_untouched(drawn):
    cols, specs = drawn
    before = matplotlib.rcParams.copy()
    pictures.picture(specs[0], cols)
    after = matplotlib.rcParams.copy()
    assert {k for k in before if before[k] != after[k]} == set()


@pytest.mark.slow
def test_threads_draw_the_same_png_as_serial(drawn):
    # Threads (a Dask worker's) share one rcParams: overlapping style contexts would leave
    # the pictures' style behind in the caller's settings, or a picture half unstyled.
    cols, specs = drawn
    serial = pictures.picture(specs[0], cols)
    before = matplotlib.rcParams.copy()
    out = [None] * 4

    def draw(i):
        out[i] = pictures.picture(specs[0], cols)

    threads = [threading.Thread(target=draw, args=(i,)) for i in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert all(png == serial for png in out)
    after = matplotlib.rcParams.copy()
    assert {k for k in before if before[k] != after[k]} == set()
