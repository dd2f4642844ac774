"""A small drawing layer for the report's figures, straight onto matplotlib's Agg renderer.

matplotlib's artist layer (figures, axes, text and line objects, tick machinery) costs
60-100 ms per figure to build before anything is drawn; the report needs all its figures
in about the time of one. This module keeps what the figures use of matplotlib -- the
antialiased Agg rasteriser through its documented renderer interface
(:class:`matplotlib.backends.backend_agg.RendererAgg`: ``new_gc``, ``draw_path``,
``draw_markers``), the bundled DejaVu Sans font through FreeType
(:class:`matplotlib.ft2font.FT2Font`) and the "nice" tick values of
:class:`matplotlib.ticker.MaxNLocator` -- and adds no objects between the data and the
pixels:

- :class:`Canvas`: an image of fixed pixel size; polylines, polygons, rectangles, markers
  and text in pixels from the top-left corner (y down), a colour bar, a legend, PNG bytes.
- :class:`Panel`: a plot area at a fixed pixel box with linear x/y scales; data are
  clipped to it; ticks, tick labels, grid, frame, axis labels and title.

Text is set from a per-process cache of glyph bitmaps rendered once by FreeType at each
size (hinted, as matplotlib renders them), laid out by their hinted advances and the
font's kerning, and blended into the image with numpy; matplotlib 3.11 renders each glyph
of each string again (about 65 µs a glyph), the cache about 3 µs.

Sizes are in pixels ([px]) except line widths, font sizes and dash lengths, which are in
points ([pt], 1/72 in) as in matplotlib, so a figure drawn here looks like one drawn by
matplotlib at the same resolution. Everything is imported lazily: importing this module
imports no matplotlib.

References
----------
.. [1] ISO/IEC 15948:2004, Portable Network Graphics (PNG): filter type 2 ("Up"), zlib
   stream in IDAT chunks, pHYs resolution chunk.
.. [2] P. Deutsch, J.-L. Gailly, "ZLIB Compressed Data Format Specification version
   3.3", RFC 1950, 1996 (header, Adler-32 trailer); P. Deutsch, "DEFLATE Compressed Data
   Format Specification version 1.3", RFC 1951, 1996 (a stream of independent blocks,
   so a sync-flushed part and a finished part concatenate into one stream).
"""

from __future__ import annotations

import math
import os
import struct
import threading
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

#: Unicode minus for negative tick labels, as matplotlib sets them.
MINUS = "\N{MINUS SIGN}"
#: Tick steps of matplotlib's default locator (1, 2, 2.5, 5 times a power of ten).
TICK_STEPS = (1.0, 2.0, 2.5, 5.0, 10.0)
#: Tick length and the gap between tick and label, as matplotlib's defaults. [pt]
TICK_LENGTH_PT = 3.5
TICK_PAD_PT = 3.5
#: Gap between the tick labels and an axis label, as matplotlib's default. [pt]
LABEL_PAD_PT = 4.0
#: Gap between a panel's top and its title, as matplotlib's default. [pt]
TITLE_PAD_PT = 6.0


@dataclass(frozen=True)
class Box:
    """A pixel box, from the image's top-left corner, y down. [px]."""

    x0: float
    y0: float
    x1: float
    y1: float

    @property
    def width(self) -> float:
        return self.x1 - self.x0

    @property
    def height(self) -> float:
        return self.y1 - self.y0

    def union(self, other: Box) -> Box:
        return Box(
            min(self.x0, other.x0),
            min(self.y0, other.y0),
            max(self.x1, other.x1),
            max(self.y1, other.y1),
        )


def _colour_row(colour, n: int) -> np.ndarray:
    """``n`` opaque RGBA pixels of a colour as one float32 row (0-255 a byte)."""
    return np.tile(np.array([*rgb(colour), 1.0], dtype=np.float32) * np.float32(255.0), n)


def rgb(colour) -> tuple[float, float, float]:
    """An ``"#rrggbb"`` string or an RGB(A) tuple of 0-1 floats as an RGB tuple. [-]."""
    if isinstance(colour, str):
        c = colour.lstrip("#")
        if len(c) != 6:
            raise ValueError(f"colour {colour!r} is not #rrggbb")
        return tuple(int(c[i : i + 2], 16) / 255.0 for i in (0, 2, 4))
    return tuple(float(v) for v in colour[:3])


# --------------------------------------------------------------------------- text


@dataclass(frozen=True)
class _Glyph:
    bitmap: np.ndarray  # alpha 0-255, row 0 at ``top`` px above the baseline
    top: int  # [px] above the baseline
    advance: float  # [px], hinted
    index: int  # glyph index in the font (for kerning)
    ink_x0: int  # first and last+1 inked column of the bitmap (bitmap x 0 = pen - _PAD)
    ink_x1: int


_PAD = 4  # [px] room left of the pen for glyphs with a negative left bearing
_GLYPHS: dict = {}
_KERNING: dict = {}
_LINE: dict = {}
_FONT_FILES: dict = {}
_FONT_LOCK = threading.Lock()


def _font(weight: str):
    """FreeType face for this thread of DejaVu Sans (matplotlib's bundled default)."""
    from matplotlib.font_manager import FontProperties, findfont, get_font

    path = _FONT_FILES.get(weight)
    if path is None:
        with _FONT_LOCK:
            path = findfont(FontProperties(family="DejaVu Sans", weight=weight))
            _FONT_FILES[weight] = path
    return get_font(path)  # matplotlib keeps one face per file and thread


def _glyph(ch: str, size_pt: float, weight: str, dpi: float) -> _Glyph:
    key = (ch, size_pt, weight, dpi)
    g = _GLYPHS.get(key)
    if g is not None:
        return g
    from matplotlib.ft2font import LoadFlags

    font = _font(weight)
    font.set_size(size_pt, dpi)
    glyph = font.load_char(ord(ch), flags=LoadFlags.DEFAULT)
    w = -(-glyph.width // 64) + 2 * _PAD
    h = -(-glyph.height // 64) + 2
    bitmap = np.zeros((max(h, 1), max(w, 1)), dtype=np.uint8)
    font.draw_glyph_to_bitmap(bitmap, _PAD, 0, glyph, antialiased=True)
    cols = np.flatnonzero(bitmap.any(axis=0))
    ink = (int(cols[0]), int(cols[-1]) + 1) if cols.size else (_PAD, _PAD)
    g = _Glyph(
        bitmap,
        glyph.horiBearingY // 64,
        glyph.horiAdvance / 64.0,
        font.get_char_index(ord(ch)),
        *ink,
    )
    _GLYPHS[key] = g
    return g


def _kerning(left: int, right: int, size_pt: float, weight: str, dpi: float) -> float:
    key = (left, right, size_pt, weight, dpi)
    k = _KERNING.get(key)
    if k is None:
        from matplotlib.ft2font import Kerning

        font = _font(weight)
        font.set_size(size_pt, dpi)
        k = font.get_kerning(left, right, Kerning.DEFAULT) / 64.0
        _KERNING[key] = k
    return k


def _line_metrics(size_pt: float, weight: str, dpi: float) -> tuple[int, int]:
    """Ascent and descent of a line of text: those of "lp", as matplotlib lays text. [px]."""
    key = (size_pt, weight, dpi)
    m = _LINE.get(key)
    if m is None:
        lg, pg = _glyph("l", size_pt, weight, dpi), _glyph("p", size_pt, weight, dpi)
        m = (lg.top, pg.bitmap.shape[0] - 2 - pg.top)
        _LINE[key] = m
    return m


@dataclass(frozen=True)
class _Layout:
    glyphs: list  # (glyph, pen x [px])
    ink_x0: int  # inked columns relative to the pen's start [px]
    ink_x1: int
    ascent: int  # line box above / below the baseline [px]
    descent: int
    top: int  # glyph bitmaps above / below the baseline [px]
    bottom: int


def _layout(s: str, size_pt: float, weight: str, dpi: float) -> _Layout:
    pen = 0.0
    prev = None
    glyphs = []
    x0, x1 = math.inf, -math.inf
    asc, desc = _line_metrics(size_pt, weight, dpi)
    top, bottom = asc, desc
    for ch in s:
        g = _glyph(ch, size_pt, weight, dpi)
        if prev is not None:
            pen += _kerning(prev, g.index, size_pt, weight, dpi)
        px = round(pen)
        glyphs.append((g, px))
        if g.ink_x1 > g.ink_x0:
            x0 = min(x0, px - _PAD + g.ink_x0)
            x1 = max(x1, px - _PAD + g.ink_x1)
        top = max(top, g.top)
        bottom = max(bottom, g.bitmap.shape[0] - g.top)
        pen += g.advance
        prev = g.index
    if x0 > x1:  # blank text
        x0 = x1 = 0
    return _Layout(glyphs, int(x0), int(x1), asc, desc, top, bottom)


_TYPESET: dict = {}
_TYPESET_MAX = 1024  # strings kept (tick labels, corner names and axis labels repeat)


def _typeset(s: str, size_pt: float, weight: str, dpi: float):
    """(layout, alpha bitmap 0-255, its weights 0-1 repeated for RGBA) of a line of text, cached per process."""
    key = (s, size_pt, weight, dpi)
    hit = _TYPESET.get(key)
    if hit is None:
        lay = _layout(s, size_pt, weight, dpi)
        alpha = _text_alpha(lay)
        hit = (lay, alpha, _weights(alpha))
        if len(_TYPESET) >= _TYPESET_MAX:
            _TYPESET.clear()
        _TYPESET[key] = hit
    return hit


def _weights(alpha: np.ndarray) -> np.ndarray:
    """Alpha 0-255 (h, w) as blending weights 0-1 for each RGBA byte (h, 4w)."""
    return np.repeat(alpha, 4, axis=1).astype(np.float32) * np.float32(1.0 / 255.0)


def _text_alpha(lay: _Layout) -> np.ndarray:
    """Alpha bitmap of a laid-out line: columns from ink_x0, rows from ``top`` above the baseline to ``bottom`` below it."""
    out = np.zeros((lay.top + lay.bottom, max(lay.ink_x1 - lay.ink_x0, 0)), dtype=np.uint8)
    for g, px in lay.glyphs:
        if g.ink_x1 <= g.ink_x0:
            continue
        c0 = px - _PAD + g.ink_x0 - lay.ink_x0
        r0 = lay.top - g.top
        src = g.bitmap[:, g.ink_x0 : g.ink_x1]
        dst = out[r0 : r0 + src.shape[0], c0 : c0 + src.shape[1]]
        np.maximum(dst, src[: dst.shape[0], : dst.shape[1]], out=dst)
    return out


# --------------------------------------------------------------------------- ticks


def nice_ticks(lo: float, hi: float, max_bins: int) -> np.ndarray:
    """Tick values inside [lo, hi] at 1, 2, 2.5 or 5 times a power of ten.

    Parameters
    ----------
    lo, hi : float
        Axis limits (either order). [data unit]
    max_bins : int
        Most intervals between ticks. [-]

    Returns
    -------
    numpy.ndarray
        Tick values, ascending, within the limits (to 1e-9 of the span).

    Examples
    --------
    >>> nice_ticks(0.0, 3760.0, 9).tolist()
    [0.0, 500.0, 1000.0, 1500.0, 2000.0, 2500.0, 3000.0, 3500.0]
    """
    from matplotlib.ticker import MaxNLocator

    a, b = sorted((float(lo), float(hi)))
    if not (math.isfinite(a) and math.isfinite(b)) or b <= a:
        return np.array([a]) if math.isfinite(a) else np.array([])
    values = MaxNLocator(nbins=max(int(max_bins), 1), steps=list(TICK_STEPS)).tick_values(a, b)
    tol = 1e-9 * (b - a)
    return values[(values >= a - tol) & (values <= b + tol)]


def tick_labels(values) -> list[str]:
    """Labels of tick values with the fewest decimals that show every one exactly, and a Unicode minus, as matplotlib's default labels.

    Examples
    --------
    >>> tick_labels([0.0, 0.25, 0.5])
    ['0.00', '0.25', '0.50']
    >>> tick_labels([-10.0, 0.0, 10.0])
    ['−10', '0', '10']
    """
    v = np.asarray(values, dtype=np.float64)
    if v.size == 0:
        return []
    scale = float(np.max(np.abs(v))) or 1.0
    decimals = 0
    for decimals in range(0, 10):
        if np.all(np.abs(np.round(v, decimals) - v) <= 1e-9 * scale):
            break
    out = []
    for x in v:
        text = f"{x:.{decimals}f}"
        if float(text) == 0.0:
            text = text.lstrip("-")
        out.append(text.replace("-", MINUS))
    return out


def auto_bins(length_px: float, size_pt: float, per_label: float, dpi: float) -> int:
    """Most tick intervals for an axis, by matplotlib's rule: the axis length over ``per_label`` font sizes (3 for x, 2 for y), at most 9.

    [-].
    """
    length_pt = length_px / dpi * 72.0
    return max(1, min(9, math.floor(length_pt / (per_label * size_pt))))


# --------------------------------------------------------------------------- canvas


_DASHES = {"--": (3.7, 1.6), ":": (1.0, 1.65), "-.": (6.4, 1.6, 1.0, 1.6)}  # [lw units]
_CAPS = {"butt", "round", "projecting"}
_POOL = None
_POOL_PID = None
_POOL_LOCK = threading.Lock()


def _pool() -> ThreadPoolExecutor:
    """The PNG encoder's helper thread, one per process (a forked child, which inherits the parent's pool but not its thread, makes its own)."""
    global _POOL, _POOL_PID
    with _POOL_LOCK:
        if _POOL is None or _POOL_PID != os.getpid():
            _POOL = ThreadPoolExecutor(max_workers=1, thread_name_prefix="limitlap-png")
            _POOL_PID = os.getpid()
        return _POOL


class Canvas:
    """An opaque RGB image of fixed pixel size, drawn on matplotlib's Agg renderer.

    Parameters
    ----------
    width_px, height_px : int
        Image size. [px]
    dpi : float
        Resolution: pixels per inch, for sizes given in points. [px/in]
    background : str
        Background colour, ``"#rrggbb"``.

    Notes
    -----
    Coordinates are pixels from the top-left corner, x right, y down; a pixel's centre is
    at +0.5. Every text drawn is recorded with its box in :attr:`texts`.
    """

    def __init__(self, width_px: int, height_px: int, dpi: float = 100.0, background="#ffffff"):
        from matplotlib.backends.backend_agg import RendererAgg

        self.width = int(width_px)
        self.height = int(height_px)
        self.dpi = float(dpi)
        self._r = RendererAgg(self.width, self.height, self.dpi)
        self._rgba = np.asarray(self._r.buffer_rgba())
        pixel = bytes([*(round(255.0 * v) for v in rgb(background)), 255])
        self._rgba.view(np.uint32).fill(np.frombuffer(pixel, dtype=np.uint32)[0])
        self.texts: list[tuple[str, Box]] = []
        self.panels: list[Panel] = []

    # ------------------------------------------------------------------ basics

    def pt(self, points: float) -> float:
        """Points as pixels at this canvas's resolution. [px]."""
        return points * self.dpi / 72.0

    @property
    def pixels(self) -> np.ndarray:
        """The image as an (height, width, 3) uint8 array (a copy)."""
        return self._rgba[..., :3].copy()

    def _gc(self, colour, lw_pt=1.0, alpha=1.0, dash=None, cap="butt", join="round", clip=None):
        gc = self._r.new_gc()
        gc.set_foreground(rgb(colour))
        gc.set_linewidth(lw_pt)
        gc.set_antialiased(True)
        if alpha != 1.0:
            gc.set_alpha(alpha)
        if dash is not None:
            pattern = _DASHES[dash] if isinstance(dash, str) else dash
            gc.set_dashes(0.0, [d * max(lw_pt, 1e-9) for d in pattern])
        gc.set_capstyle(cap)
        gc.set_joinstyle(join)
        if clip is not None:
            from matplotlib.transforms import Bbox

            gc.set_clip_rectangle(
                Bbox.from_extents(clip.x0, self.height - clip.y1, clip.x1, self.height - clip.y0)
            )
        return gc

    def _path(self, x, y, codes=None, closed=False):
        from matplotlib.path import Path

        x = np.asarray(x, dtype=np.float64)
        y = self.height - np.asarray(y, dtype=np.float64)  # Agg's y runs up
        verts = np.column_stack([x, y])
        if closed:
            verts = np.vstack([verts, verts[:1]])
            if codes is None:
                codes = np.full(len(verts), Path.LINETO, dtype=Path.code_type)
                codes[0] = Path.MOVETO
                codes[-1] = Path.CLOSEPOLY
        p = Path(verts, codes)
        # matplotlib's own defaults for long lines, set here so the caller's settings
        # cannot change the figures
        p.should_simplify = codes is None and len(verts) >= 128
        p.simplify_threshold = 1.0 / 9.0
        return p

    def _identity(self):
        from matplotlib.transforms import IdentityTransform

        return IdentityTransform()

    # ------------------------------------------------------------------ shapes

    def polyline(
        self,
        x_px,
        y_px,
        colour,
        lw_pt: float = 1.0,
        *,
        alpha: float = 1.0,
        dash=None,
        cap: str | None = None,
        join: str = "round",
        clip: Box | None = None,
        closed: bool = False,
    ) -> None:
        """A line through the points; NaN points break it.

        ``dash`` is ``"--"``, ``":"``, ``"-."`` or a pattern in line widths; ``cap``
        defaults to projecting (solid) or butt (dashed), as matplotlib's lines.
        """
        x = np.asarray(x_px, dtype=np.float64)
        if x.size < 2:
            return
        y = np.asarray(y_px, dtype=np.float64)
        cap = cap or ("butt" if dash else "projecting")
        if x.size <= 1024:
            dx, dy = np.diff(x), np.diff(y)
            if np.all((np.abs(dx) < 1e-4) | (np.abs(dy) < 1e-4)):
                x, y = self._snap_shift(x, y, lw_pt)
        gc = self._gc(colour, lw_pt, alpha, dash, cap, join, clip)
        self._r.draw_path(gc, self._path(x, y, closed=closed), self._identity())
        gc.restore()

    def _snap_shift(self, x, y, lw_pt):
        """Points of a horizontal/vertical line moved so Agg's pixel snapping puts it on the pixel centre nearest the true place.

        Agg (as matplotlib sets it up) snaps such lines to whole pixels: a line an odd
        number of pixels wide to ``floor(v + 0.5) + 0.5``, the centre of the pixel right
        of / below the nearest pixel edge -- half a pixel off on average (measured: a
        1 px line at x = 84.5 lands in column 85). Moving the points half a pixel back
        first puts it in the pixel that holds the true place; even widths snap to the
        nearest edge, unbiased.
        """
        if round(self.pt(lw_pt)) % 2 == 1:
            return x - 0.5, y - 0.5
        return x, y

    def segments(
        self, x_px, y_px, colour, lw_pt=1.0, *, alpha=1.0, dash=None, cap="butt", clip=None
    ) -> None:
        """Separate straight segments (x_px, y_px of shape (n, 2)) in one stroke."""
        from matplotlib.path import Path

        x = np.asarray(x_px, dtype=np.float64).reshape(-1, 2)
        y = np.asarray(y_px, dtype=np.float64).reshape(-1, 2)
        if x.shape[0] == 0:
            return
        codes = np.tile(np.array([Path.MOVETO, Path.LINETO], dtype=Path.code_type), x.shape[0])
        if x.size <= 1024 and np.all(
            (np.abs(x[:, 1] - x[:, 0]) < 1e-4) | (np.abs(y[:, 1] - y[:, 0]) < 1e-4)
        ):
            x, y = self._snap_shift(x, y, lw_pt)
        gc = self._gc(colour, lw_pt, alpha, dash, cap, "round", clip)
        self._r.draw_path(gc, self._path(x.ravel(), y.ravel(), codes), self._identity())
        gc.restore()

    def runs(
        self, x_px, y_px, starts, stops, colour, lw_pt=1.0, *, cap="round", join="round", clip=None
    ) -> None:
        """Pieces ``[starts[i], stops[i])`` of one polyline, as one path of sub-lines (so a line coloured by value is one stroke per colour, not one per segment)."""
        from matplotlib.path import Path

        starts = np.asarray(starts, dtype=np.int64)
        stops = np.asarray(stops, dtype=np.int64)
        keep = stops - starts >= 2
        starts, stops = starts[keep], stops[keep]
        if starts.size == 0:
            return
        lengths = stops - starts
        idx = np.repeat(starts - np.cumsum(np.r_[0, lengths[:-1]]), lengths) + np.arange(
            lengths.sum()
        )
        codes = np.full(idx.size, Path.LINETO, dtype=Path.code_type)
        codes[np.cumsum(np.r_[0, lengths[:-1]])] = Path.MOVETO
        x = np.asarray(x_px, dtype=np.float64)[idx]
        y = np.asarray(y_px, dtype=np.float64)[idx]
        gc = self._gc(colour, lw_pt, 1.0, None, cap, join, clip)
        self._r.draw_path(gc, self._path(x, y, codes), self._identity())
        gc.restore()

    def polygon(
        self,
        x_px,
        y_px,
        face,
        *,
        alpha: float = 1.0,
        edge=None,
        lw_pt: float = 0.0,
        clip: Box | None = None,
    ) -> None:
        """A filled polygon (closed automatically), optionally outlined."""
        x = np.asarray(x_px, dtype=np.float64)
        if x.size < 3:
            return
        gc = self._gc(edge or face, lw_pt if edge else 0.0, alpha, None, "butt", "miter", clip)
        face_rgb = rgb(face)
        self._r.draw_path(gc, self._path(x, y_px, closed=True), self._identity(), face_rgb)
        gc.restore()

    def rect(
        self,
        x0,
        y0,
        x1,
        y1,
        face,
        *,
        alpha: float = 1.0,
        edge=None,
        lw_pt: float = 0.0,
        clip: Box | None = None,
    ) -> None:
        """A filled rectangle between two corners (either order)."""
        xa, xb = sorted((float(x0), float(x1)))
        ya, yb = sorted((float(y0), float(y1)))
        self.polygon(
            [xa, xb, xb, xa], [ya, ya, yb, yb], face, alpha=alpha, edge=edge, lw_pt=lw_pt, clip=clip
        )

    def markers(
        self,
        x_px,
        y_px,
        marker: str,
        size_px: float,
        colour,
        *,
        alpha: float = 1.0,
        lw_pt: float = 1.0,
        clip: Box | None = None,
    ) -> None:
        """One marker at each point: ``"o"`` filled disc, ``"s"`` filled square, ``"x"`` stroked cross; ``size_px`` is the marker's width."""
        from matplotlib.path import Path
        from matplotlib.transforms import Affine2D

        x = np.asarray(x_px, dtype=np.float64)
        y = np.asarray(y_px, dtype=np.float64)
        ok = np.isfinite(x) & np.isfinite(y)
        if not ok.any():
            return
        if marker == "o":
            shape, filled = Path.unit_circle(), True
        elif marker == "s":
            shape, filled = (
                Path.unit_rectangle().transformed(Affine2D().translate(-0.5, -0.5).scale(2.0)),
                True,
            )
        elif marker == "x":
            shape = Path(
                [[-1, -1], [1, 1], [-1, 1], [1, -1]],
                [Path.MOVETO, Path.LINETO, Path.MOVETO, Path.LINETO],
            )
            filled = False
        else:
            raise ValueError(f"unknown marker {marker!r}")
        gc = self._gc(colour, lw_pt if not filled else 0.0, alpha, None, "butt", "round", clip)
        face = rgb(colour) if filled else None
        pos = self._path(x[ok], y[ok])
        pos.should_simplify = False
        self._r.draw_markers(
            gc, shape, Affine2D().scale(0.5 * size_px), pos, self._identity(), face
        )
        gc.restore()

    def image(self, x0: int, y0: int, pixels) -> None:
        """Copy an (h, w, 3) uint8 array into the image with its top-left at (x0, y0)."""
        p = np.asarray(pixels, dtype=np.uint8)
        x0, y0 = int(x0), int(y0)
        xa, ya = max(x0, 0), max(y0, 0)
        xb, yb = min(x0 + p.shape[1], self.width), min(y0 + p.shape[0], self.height)
        if xb > xa and yb > ya:
            self._rgba[ya:yb, xa:xb, :3] = p[ya - y0 : yb - y0, xa - x0 : xb - x0]

    # ------------------------------------------------------------------ text

    def text_extent(self, s: str, size_pt: float = 11.0, weight: str = "normal"):
        """(width, ascent, descent) of a line of text, unrotated. [px]."""
        lay = _typeset(str(s), float(size_pt), weight, self.dpi)[0]
        return float(lay.ink_x1 - lay.ink_x0), float(lay.ascent), float(lay.descent)

    def text_width(self, texts, size_pt: float = 11.0, weight: str = "normal") -> float:
        """Width of the widest of ``texts``. [px]."""
        return max((self.text_extent(t, size_pt, weight)[0] for t in texts), default=0.0)

    def text(
        self,
        x: float,
        y: float,
        s: str,
        *,
        size_pt: float = 11.0,
        colour="#222222",
        ha: str = "left",
        va: str = "baseline",
        rotation: float = 0.0,
        weight: str = "normal",
        anchor: bool = False,
    ) -> Box:
        """Write one line of text; returns its pixel box.

        ``ha`` (left, center, right) and ``va`` (top, center, baseline, bottom) place the
        text's box -- the line's ascent and descent as in matplotlib, the inked width -- at
        (x, y). ``rotation`` [deg] is counter-clockwise; by default the rotated box is then
        aligned, with ``anchor=True`` the text is aligned unrotated and turned about
        (x, y), as matplotlib's ``rotation_mode="anchor"``.
        """
        s = str(s)
        lay, alpha, weights = _typeset(s, float(size_pt), weight, self.dpi)
        w = lay.ink_x1 - lay.ink_x0
        # unrotated: bitmap rows [-top, bottom) around the baseline; box rows [-asc, desc)
        fx = {"left": 0.0, "center": 0.5, "right": 1.0}[ha]
        base = {
            "top": lay.ascent,
            "bottom": -lay.descent,
            "center": 0.5 * (lay.ascent - lay.descent),
            "center_baseline": 0.5 * lay.ascent,
            "baseline": 0.0,
        }[va]
        rot = float(rotation) % 360.0
        if rot == 0.0:
            left = round(x - fx * w)
            top = round(y + base) - lay.top
            self._blend(alpha, left, top, colour, weights)
            box = Box(left, round(y + base) - lay.ascent, left + w, round(y + base) + lay.descent)
            box = box.union(Box(left, top, left + w, top + alpha.shape[0]))
        else:
            fy = {
                "top": 0.0,
                "center": 0.5,
                "center_baseline": 0.5,
                "bottom": 1.0,
                "baseline": 1.0,
            }[va]
            box = self._rotated(alpha, lay, w, x, y, fx, fy, base, rot, anchor, colour)
        self.texts.append((s, box))
        return box

    def _rotated(self, alpha, lay, w, x, y, fx, fy, base, rot, anchor, colour) -> Box:
        """Blend a rotated text bitmap; returns its box (see :meth:`text`)."""
        h = alpha.shape[0]
        th = math.radians(rot)
        if rot in (90.0, 180.0, 270.0):
            img = np.rot90(alpha, int(rot // 90))
        else:
            from PIL import Image

            img = np.asarray(
                Image.fromarray(alpha).rotate(rot, resample=Image.Resampling.BICUBIC, expand=True)
            )
        c, s_ = math.cos(th), math.sin(th)

        # where a point (u, v) of the unrotated bitmap (x right, y down) lands in the
        # rotated one, turned counter-clockwise on screen about the bitmaps' centres
        def to_rot(u, v):
            du, dv = u - 0.5 * w, v - 0.5 * h
            return 0.5 * img.shape[1] + c * du + s_ * dv, 0.5 * img.shape[0] - s_ * du + c * dv

        if anchor:  # the unrotated box's alignment point goes to (x, y)
            px, py = to_rot(fx * w, lay.top - base)
        else:  # the rotated line box is aligned by ha/va
            corners = [
                to_rot(u, v)
                for u in (0.0, w)
                for v in (lay.top - lay.ascent, lay.top + lay.descent)
            ]
            us = [p[0] for p in corners]
            vs = [p[1] for p in corners]
            px = min(us) + fx * (max(us) - min(us))
            py = min(vs) + fy * (max(vs) - min(vs))
        left = round(x - px)
        top = round(y - py)
        self._blend(img, left, top, colour)
        rows = np.flatnonzero(img.any(axis=1))
        cols = np.flatnonzero(img.any(axis=0))
        if rows.size == 0:
            return Box(left, top, left, top)
        return Box(left + cols[0], top + rows[0], left + cols[-1] + 1, top + rows[-1] + 1)

    def _blend(self, alpha: np.ndarray, left: int, top: int, colour, weights=None) -> None:
        """Blend ``colour`` into the image by an alpha bitmap (0-255) at (left, top); ``weights`` are the bitmap's :func:`_weights` when already known.

        All four channels of each pixel are blended, row by row over contiguous memory
        (the opaque alpha channel stays 255): numpy's loops over a 3-channel slice of the
        RGBA image were 8 times slower (170 against 22 µs for an axis label).
        """
        h, w = alpha.shape
        xa, ya = max(left, 0), max(top, 0)
        xb, yb = min(left + w, self.width), min(top + h, self.height)
        if xb <= xa or yb <= ya:
            return
        if weights is None:
            weights = _weights(alpha)
        n = xb - xa
        a = weights[ya - top : yb - top, 4 * (xa - left) : 4 * (xb - left)]
        region = self._rgba[ya:yb, xa:xb].reshape(yb - ya, 4 * n)
        out = np.subtract(_colour_row(colour, n), region, dtype=np.float32)
        out *= a
        out += region
        out += 0.5
        np.copyto(region, out, casting="unsafe")

    # ------------------------------------------------------------------ legend, colour bar

    def legend(
        self,
        entries,
        *,
        loc: str = "upper right",
        within: Box | None = None,
        ncols: int = 1,
        size_pt: float = 11.0,
        frame: bool = False,
        frame_alpha: float = 0.85,
        title: str | None = None,
        title_size_pt: float | None = None,
        avoid=None,
        avoid_boxes=(),
    ) -> Box:
        """A legend of ``entries`` (see :class:`Entry`) placed at ``loc`` inside ``within`` (default: the whole image), laid out as matplotlib's: handles 2 font sizes long, 0.8 font size from their labels, rows 0.5 font size apart, columns 2 font sizes apart, 0.5 font size from the edges.

        ``loc`` is "upper right", "upper left", "lower left", "lower right", "center
        right", "center left", "upper center", "lower center", "center", or "best": the
        first of those with the fewest of the ``avoid`` points (x_px, y_px) and
        ``avoid_boxes`` (:class:`Box`) under it. Returns the legend's box.
        """
        entries = list(entries)
        within = within or Box(0, 0, self.width, self.height)
        fs = self.pt(size_pt)
        asc, desc = _line_metrics(float(size_pt), "normal", self.dpi)
        row_h = max(asc + desc, 0.7 * fs)
        handle_w, text_pad, col_gap, row_gap, pad = 2.0 * fs, 0.8 * fs, 2.0 * fs, 0.5 * fs, 0.4 * fs
        ncols = max(1, min(int(ncols), len(entries) or 1))
        nrows = -(-len(entries) // ncols) if entries else 0
        cols = [entries[i * nrows : (i + 1) * nrows] for i in range(ncols)]
        col_w = [
            handle_w + text_pad + self.text_width([e.label for e in col], size_pt) for col in cols
        ]
        title_h = 0.0
        if title:
            tsz = title_size_pt or size_pt
            ta, td = _line_metrics(float(tsz), "normal", self.dpi)
            title_h = ta + td + row_gap
            title_w = self.text_width([title], tsz)
        width = sum(col_w) + col_gap * (ncols - 1) + 2 * pad
        inset = 0.0  # entries centred under a title wider than they are
        if title and title_w + 2 * pad > width:
            inset = 0.5 * (title_w + 2 * pad - width)
            width = title_w + 2 * pad
        height = title_h + nrows * row_h + max(nrows - 1, 0) * row_gap + 2 * pad
        gap = 0.5 * fs

        def place(where):
            vert, _, horiz = where.partition(" ")
            if where == "center":
                vert = horiz = "center"
            elif where in ("center right", "center left"):
                vert, horiz = "center", where.split()[1]
            if vert == "upper":
                y0 = within.y0 + gap
            elif vert == "lower":
                y0 = within.y1 - gap - height
            else:
                y0 = 0.5 * (within.y0 + within.y1 - height)
            if horiz == "left":
                x0 = within.x0 + gap
            elif horiz == "right":
                x0 = within.x1 - gap - width
            else:
                x0 = 0.5 * (within.x0 + within.x1 - width)
            return Box(x0, y0, x0 + width, y0 + height)

        if loc == "best":
            order = [
                "upper right",
                "upper left",
                "lower left",
                "lower right",
                "center right",
                "center left",
                "center right",
                "lower center",
                "upper center",
                "center",
            ]
            ax_, ay_ = (np.asarray(a, dtype=np.float64) for a in avoid) if avoid else ([], [])
            best, box = None, None
            for where in order:
                b = place(where)
                n = int(
                    np.count_nonzero((ax_ >= b.x0) & (ax_ <= b.x1) & (ay_ >= b.y0) & (ay_ <= b.y1))
                ) + sum(
                    o.x0 < b.x1 and b.x0 < o.x1 and o.y0 < b.y1 and b.y0 < o.y1 for o in avoid_boxes
                )
                if best is None or n < best:
                    best, box = n, b
                if n == 0:
                    break
        else:
            box = place(loc)
        if frame:
            self.rect(box.x0, box.y0, box.x1, box.y1, "#ffffff", alpha=frame_alpha)
        y = box.y0 + pad
        if title:
            self.text(
                0.5 * (box.x0 + box.x1),
                y,
                title,
                size_pt=title_size_pt or size_pt,
                ha="center",
                va="top",
            )
            y += title_h
        x = box.x0 + pad + inset
        for col, cw in zip(cols, col_w, strict=True):
            yy = y
            for e in col:
                mid = yy + 0.5 * row_h
                e.draw(self, x, x + handle_w, mid, fs)
                self.text(x + handle_w + text_pad, mid, e.label, size_pt=size_pt, va="center")
                yy += row_h + row_gap
            x += cw + col_gap
        return box

    def colour_bar(
        self, box: Box, colours, ticks_frac, labels, label: str, size_pt: float = 11.0
    ) -> None:
        """A horizontal colour bar: ``colours`` (n, 3) in 0-1 left to right over ``box``, ticks at fractions of its width with their labels below, ``label`` under them."""
        cols = np.asarray(colours, dtype=np.float64)
        x0, x1 = round(box.x0), round(box.x1)
        y0, y1 = round(box.y0), round(box.y1)
        n = cols.shape[0]
        pos = (np.arange(x1 - x0) + 0.5) / (x1 - x0) * n
        strip = np.round(cols[np.clip(pos.astype(np.int64), 0, n - 1)] * 255.0).astype(np.uint8)
        self.image(x0, y0, np.broadcast_to(strip[None, :, :], (y1 - y0, x1 - x0, 3)))
        # frame and ticks as matplotlib's colour bar: thin dark outline, ticks below
        self.polyline(
            [x0, x1, x1, x0],
            [y0, y0, y1, y1],
            "#888888",
            0.8,
            closed=True,
            cap="butt",
            join="miter",
        )
        tick = self.pt(TICK_LENGTH_PT)
        fr = np.asarray(ticks_frac, dtype=np.float64)
        tx = x0 + fr * (x1 - x0)
        self.segments(
            np.column_stack([tx, tx]),
            np.column_stack([np.full_like(tx, y1), np.full_like(tx, y1 + tick)]),
            "#222222",
            0.8,
        )
        bottom = y1
        for xx, text in zip(tx, labels, strict=True):
            b = self.text(
                xx, y1 + tick + self.pt(TICK_PAD_PT), text, size_pt=size_pt, ha="center", va="top"
            )
            bottom = max(bottom, b.y1)
        self.text(
            0.5 * (x0 + x1),
            bottom + self.pt(LABEL_PAD_PT),
            label,
            size_pt=size_pt,
            ha="center",
            va="top",
        )

    # ------------------------------------------------------------------ output

    def png(self, dpi: float | None = None, level: int = 1) -> bytes:
        """The image as PNG bytes (RGB, 8 bits a channel, resolution in a pHYs chunk) [1]_.

        Every row is filtered by "Up" (its difference to the row above) and deflated at
        zlib ``level``; the upper and lower halves are filtered and deflated at once in
        two threads (numpy and zlib release the interpreter lock), the upper half
        sync-flushed, so the two concatenate into one zlib stream [2]_.

        Measured on the demo report's 10 figures (1200 x 360 to 1400 x 520 px, the same
        pixels each way, median of 7 on this 2-core machine): this, at level 1, 2-5 ms a
        figure; Pillow (from a copy of the pixels) 11-27 ms at ``compress_level=3``,
        11-27 ms at 1 and still 9-25 ms at 0 (its filter choice per row costs the same
        whatever the level). Files are 2-24 % larger than Pillow's level 3 (763 against
        711 kB for the 10). With another process busy on the second core, the two
        threads take about as long as one (8 ms for the g-g figure, median of 30).
        """
        h, w = self.height, self.width
        flat = self._rgba.reshape(h, 4 * w)
        half = h // 2 if h >= 64 else h
        if half < h:
            lower = _pool().submit(_deflate_rows, flat, half, h, level, True)
            upper = _deflate_rows(flat, 0, half, level, False)
            data_b, adler_b, len_b = lower.result()
            data_a, adler_a, _ = upper
            data, adler = data_a + data_b, _adler32_combine(adler_a, adler_b, len_b)
        else:
            data, adler, _ = _deflate_rows(flat, 0, h, level, True)
        stream = b"\x78\x01" + data + struct.pack(">I", adler)
        ppm = round((self.dpi if dpi is None else dpi) / 0.0254)  # pixels per metre

        def chunk(kind: bytes, payload: bytes) -> bytes:
            body = kind + payload
            return struct.pack(">I", len(payload)) + body + struct.pack(">I", zlib.crc32(body))

        return b"".join(
            [
                b"\x89PNG\r\n\x1a\n",
                chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0)),
                chunk(b"pHYs", struct.pack(">IIB", ppm, ppm, 1)),
                chunk(b"IDAT", stream),
                chunk(b"IEND", b""),
            ]
        )


_RGB_COLUMNS: dict = {}


def _deflate_rows(flat: np.ndarray, r0: int, r1: int, level: int, last: bool):
    """Rows [r0, r1) of an RGBA image (h, 4w) as PNG "Up"-filtered RGB, raw-deflated.

    Returns (deflate bytes, Adler-32 of the filtered bytes, their count); the part is
    finished if ``last``, else sync-flushed (byte-aligned, to be continued).
    """
    w = flat.shape[1] // 4
    cols = _RGB_COLUMNS.get(w)
    if cols is None:
        cols = np.arange(3 * w) // 3 * 4 + np.arange(3 * w) % 3
        _RGB_COLUMNS[w] = cols
    first = max(r0 - 1, 0)
    rgb_rows = np.take(flat[first:r1], cols, axis=1)
    raw = np.empty((r1 - r0, 1 + 3 * w), dtype=np.uint8)
    raw[:, 0] = 2  # filter type Up
    if r0 == 0:
        raw[0, 1:] = rgb_rows[0]
        np.subtract(rgb_rows[1:], rgb_rows[:-1], out=raw[1:, 1:])  # modulo 256
    else:
        np.subtract(rgb_rows[1:], rgb_rows[:-1], out=raw[:, 1:])
    c = zlib.compressobj(level, zlib.DEFLATED, -15, 8, zlib.Z_DEFAULT_STRATEGY)
    data = c.compress(memoryview(raw)) + c.flush(zlib.Z_FINISH if last else zlib.Z_SYNC_FLUSH)
    return data, zlib.adler32(raw), raw.size


def _adler32_combine(adler_a: int, adler_b: int, len_b: int) -> int:
    """Adler-32 of A + B from those of A and B and B's length (RFC 1950's sums, combined as zlib's ``adler32_combine``).

    Examples
    --------
    >>> import zlib
    >>> _adler32_combine(zlib.adler32(b"lap"), zlib.adler32(b" time"), 5) == zlib.adler32(b"lap time")
    True
    """
    base = 65521
    rem = len_b % base
    s1 = adler_a & 0xFFFF
    s2 = (rem * s1) % base
    s1 = (s1 + (adler_b & 0xFFFF) + base - 1) % base
    s2 = (s2 + (adler_a >> 16) + (adler_b >> 16) + base - rem) % base
    return s1 | (s2 << 16)


@dataclass(frozen=True)
class Entry:
    """One legend entry: ``kind`` "line", "patch" or "marker" with its style."""

    label: str
    kind: str
    colour: object
    lw_pt: float = 1.5
    dash: object = None
    alpha: float = 1.0
    marker: str = "o"
    size_px: float = 6.0

    def draw(self, canvas: Canvas, x0: float, x1: float, y: float, fs: float) -> None:
        if self.kind == "line":
            canvas.polyline(
                [x0, x1], [y, y], self.colour, self.lw_pt, alpha=self.alpha, dash=self.dash
            )
        elif self.kind == "patch":
            canvas.rect(x0, y - 0.35 * fs, x1, y + 0.35 * fs, self.colour, alpha=self.alpha)
        elif self.kind == "marker":
            canvas.markers(
                [0.5 * (x0 + x1)],
                [y],
                self.marker,
                self.size_px,
                self.colour,
                alpha=self.alpha,
                lw_pt=self.lw_pt,
            )
        else:
            raise ValueError(f"unknown legend entry kind {self.kind!r}")


# --------------------------------------------------------------------------- panels


class Panel:
    """A plot area at a fixed pixel box with linear scales; drawing is clipped to it.

    Parameters
    ----------
    canvas : Canvas
        Where it is drawn.
    left, top, width, height : float
        The plot area. [px]
    xlim, ylim : tuple of float
        Data values at the left/right and bottom/top edges (a reversed pair reverses the
        axis). [data unit]
    """

    def __init__(self, canvas: Canvas, left, top, width, height, xlim=(0.0, 1.0), ylim=(0.0, 1.0)):
        self.canvas = canvas
        self.box = Box(float(left), float(top), float(left + width), float(top + height))
        self.xlim = (float(xlim[0]), float(xlim[1]))
        self.ylim = (float(ylim[0]), float(ylim[1]))
        canvas.panels.append(self)

    # ------------------------------------------------------------------ scales

    def px(self, x):
        """Data x to pixel column (float). [px]."""
        a, b = self.xlim
        return self.box.x0 + (np.asarray(x, dtype=np.float64) - a) * (self.box.width / (b - a))

    def py(self, y):
        """Data y to pixel row (float), up the image for increasing y. [px]."""
        a, b = self.ylim
        return self.box.y1 - (np.asarray(y, dtype=np.float64) - a) * (self.box.height / (b - a))

    def fy(self, frac):
        """Fraction of the panel's height from its bottom to pixel row. [px]."""
        return self.box.y1 - float(frac) * self.box.height

    def fx(self, frac):
        """Fraction of the panel's width from its left to pixel column. [px]."""
        return self.box.x0 + float(frac) * self.box.width

    # ------------------------------------------------------------------ data

    def line(self, x, y, colour, lw_pt=1.5, **kwargs) -> None:
        """A data line, clipped to the panel (see :meth:`Canvas.polyline`)."""
        kwargs.setdefault("clip", self.box)
        self.canvas.polyline(self.px(x), self.py(y), colour, lw_pt, **kwargs)

    def fill_between(self, x, y0, y1, colour, alpha=1.0, where=None) -> None:
        """Fill between two curves (``y0`` may be a number), only where ``where`` holds; a run ending between stations ends where the curves cross (linear)."""
        x = np.asarray(x, dtype=np.float64)
        y1 = np.asarray(y1, dtype=np.float64)
        y0 = np.broadcast_to(np.asarray(y0, dtype=np.float64), y1.shape)
        ok = np.isfinite(x) & np.isfinite(y0) & np.isfinite(y1)
        if where is not None:
            ok &= np.asarray(where, dtype=bool)
        if not ok.any():
            return
        d = np.diff(ok.astype(np.int8))
        starts = np.flatnonzero(d == 1) + 1
        stops = np.flatnonzero(d == -1) + 1
        if ok[0]:
            starts = np.r_[0, starts]
        if ok[-1]:
            stops = np.r_[stops, ok.size]
        gap = y1 - y0
        for a, b in zip(starts, stops, strict=True):
            xs, top_, bot = x[a:b], y1[a:b], y0[a:b]
            # extend to the crossing with the neighbouring station, as fill_between's
            # interpolate=True does
            if a > 0 and np.isfinite(gap[a - 1]) and gap[a - 1] != gap[a]:
                t = gap[a] / (gap[a] - gap[a - 1])
                xc = x[a] + t * (x[a - 1] - x[a])
                yc = y0[a] + t * (y0[a - 1] - y0[a])
                xs, top_, bot = np.r_[xc, xs], np.r_[yc, top_], np.r_[yc, bot]
            if b < x.size and np.isfinite(gap[b]) and gap[b] != gap[b - 1]:
                t = gap[b - 1] / (gap[b - 1] - gap[b])
                xc = x[b - 1] + t * (x[b] - x[b - 1])
                yc = y0[b - 1] + t * (y0[b] - y0[b - 1])
                xs, top_, bot = np.r_[xs, xc], np.r_[top_, yc], np.r_[bot, yc]
            px = self.px(np.r_[xs, xs[::-1]])
            py = self.py(np.r_[top_, bot[::-1]])
            self.canvas.polygon(px, py, colour, alpha=alpha, clip=self.box)

    def vband(self, x0, x1, colour, alpha=1.0) -> None:
        """A band over the panel's whole height between two x values."""
        self.canvas.rect(
            self.px(x0), self.box.y0, self.px(x1), self.box.y1, colour, alpha=alpha, clip=self.box
        )

    def hline(self, y, colour, lw_pt=1.0, **kwargs) -> None:
        """A horizontal line across the panel at data y."""
        kwargs.setdefault("cap", "butt")
        self.canvas.polyline(
            [self.box.x0, self.box.x1], [self.py(y)] * 2, colour, lw_pt, clip=self.box, **kwargs
        )

    def vline(self, x, colour, lw_pt=1.0, **kwargs) -> None:
        """A vertical line over the panel's height at data x."""
        kwargs.setdefault("cap", "butt")
        self.canvas.polyline(
            [self.px(x)] * 2, [self.box.y0, self.box.y1], colour, lw_pt, clip=self.box, **kwargs
        )

    def scatter(self, x, y, marker="o", size_px=3.0, colour="#444444", **kwargs) -> None:
        """Markers at data points, clipped to the panel."""
        kwargs.setdefault("clip", self.box)
        self.canvas.markers(self.px(x), self.py(y), marker, size_px, colour, **kwargs)

    def barh(self, y, width, colours, height=0.7, left=0.0) -> None:
        """Horizontal bars centred on data y, from ``left`` to ``left + width``."""
        for yi, wi, c in zip(np.atleast_1d(y), np.atleast_1d(width), colours, strict=True):
            if np.isfinite(wi):
                self.canvas.rect(
                    self.px(left),
                    self.py(yi - 0.5 * height),
                    self.px(left + wi),
                    self.py(yi + 0.5 * height),
                    c,
                    clip=self.box,
                )

    def bar(self, x, height, colour, width=0.8, bottom=0.0) -> None:
        """Vertical bars centred on data x, from ``bottom`` to ``bottom + height``."""
        for xi, hi in zip(np.atleast_1d(x), np.atleast_1d(height), strict=True):
            if np.isfinite(hi):
                self.canvas.rect(
                    self.px(xi - 0.5 * width),
                    self.py(bottom),
                    self.px(xi + 0.5 * width),
                    self.py(bottom + hi),
                    colour,
                    clip=self.box,
                )

    def text(self, x, y, s, *, dx=0.0, dy=0.0, **kwargs) -> Box:
        """Text at data (x, y) moved by (dx, dy) pixels, dy up (see :meth:`Canvas.text`)."""
        return self.canvas.text(float(self.px(x)) + dx, float(self.py(y)) - dy, s, **kwargs)

    # ------------------------------------------------------------------ axes

    def auto_xticks(self, size_pt=11.0):
        """X tick values by matplotlib's default rule for this panel's width."""
        n = auto_bins(self.box.width, size_pt, 3.0, self.canvas.dpi)
        return nice_ticks(*self.xlim, n)

    def auto_yticks(self, size_pt=11.0):
        """Y tick values by matplotlib's default rule for this panel's height."""
        n = auto_bins(self.box.height, size_pt, 2.0, self.canvas.dpi)
        return nice_ticks(*self.ylim, n)

    def grid(self, xticks=None, yticks=None, colour="#d9d9d9", lw_pt=0.6) -> None:
        """Grid lines at the given tick values (drawn below what follows)."""
        b = self.box
        if xticks is not None and len(xticks):
            x = self.px(xticks)
            self.canvas.segments(
                np.column_stack([x, x]), np.tile([b.y0, b.y1], (x.size, 1)), colour, lw_pt, clip=b
            )
        if yticks is not None and len(yticks):
            y = self.py(yticks)
            self.canvas.segments(
                np.tile([b.x0, b.x1], (y.size, 1)), np.column_stack([y, y]), colour, lw_pt, clip=b
            )

    def frame(self, sides=("left", "bottom"), colour="#888888", lw_pt=0.8) -> None:
        """Axis lines (spines) on the given sides of the panel."""
        b = self.box
        segs = {
            "left": ((b.x0, b.x0), (b.y0, b.y1)),
            "right": ((b.x1, b.x1), (b.y0, b.y1)),
            "bottom": ((b.x0, b.x1), (b.y1, b.y1)),
            "top": ((b.x0, b.x1), (b.y0, b.y0)),
        }
        xs = [segs[s][0] for s in sides]
        ys = [segs[s][1] for s in sides]
        if xs:
            self.canvas.segments(xs, ys, colour, lw_pt, cap="projecting")

    def xticks(
        self,
        values,
        labels=None,
        *,
        size_pt=11.0,
        rotation=0.0,
        ha="center",
        anchor=False,
        show_labels=True,
        colour="#222222",
    ) -> float:
        """Ticks below the panel at data x values and their labels; returns the lowest pixel row the labels reach.

        [px].
        """
        c = self.canvas
        b = self.box
        v = np.asarray(values, dtype=np.float64)
        x = self.px(v)
        tick = c.pt(TICK_LENGTH_PT)
        if v.size:
            c.segments(
                np.column_stack([x, x]), np.tile([b.y1, b.y1 + tick], (v.size, 1)), colour, 0.8
            )
        bottom = b.y1 + tick
        if show_labels:
            labels = tick_labels(v) if labels is None else labels
            for xx, text in zip(x, labels, strict=True):
                bb = c.text(
                    float(xx),
                    b.y1 + tick + c.pt(TICK_PAD_PT),
                    text,
                    size_pt=size_pt,
                    ha=ha,
                    va="top",
                    rotation=rotation,
                    anchor=anchor,
                    colour=colour,
                )
                bottom = max(bottom, bb.y1)
        return bottom

    def yticks(
        self, values, labels=None, *, size_pt=11.0, show_labels=True, colour="#222222"
    ) -> float:
        """Ticks left of the panel at data y values and their labels; returns the leftmost pixel column the labels reach.

        [px].
        """
        c = self.canvas
        b = self.box
        v = np.asarray(values, dtype=np.float64)
        y = self.py(v)
        tick = c.pt(TICK_LENGTH_PT)
        if v.size:
            c.segments(
                np.tile([b.x0 - tick, b.x0], (v.size, 1)), np.column_stack([y, y]), colour, 0.8
            )
        left = b.x0 - tick
        if show_labels:
            labels = tick_labels(v) if labels is None else labels
            for yy, text in zip(y, labels, strict=True):
                bb = c.text(
                    b.x0 - tick - c.pt(TICK_PAD_PT),
                    float(yy),
                    text,
                    size_pt=size_pt,
                    ha="right",
                    va="center_baseline",
                    colour=colour,
                )
                left = min(left, bb.x0)
        return left

    def xlabel(self, text, below_px, size_pt=11.0) -> Box:
        """Axis label centred under the panel, its top ``below_px`` (the tick labels' lowest row) plus matplotlib's label pad."""
        c = self.canvas
        return c.text(
            0.5 * (self.box.x0 + self.box.x1),
            below_px + c.pt(LABEL_PAD_PT),
            text,
            size_pt=size_pt,
            ha="center",
            va="top",
        )

    def ylabel(self, text, left_px, size_pt=11.0) -> Box:
        """Axis label up the panel's left side, right of it at ``left_px`` (the tick labels' leftmost column) less matplotlib's label pad."""
        c = self.canvas
        return c.text(
            left_px - c.pt(LABEL_PAD_PT),
            0.5 * (self.box.y0 + self.box.y1),
            text,
            size_pt=size_pt,
            ha="right",
            va="center",
            rotation=90.0,
        )

    def title(self, text, size_pt=12.0, loc="left") -> Box:
        """Title above the panel (left-aligned or centred), matplotlib's pad above it."""
        c = self.canvas
        x = self.box.x0 if loc == "left" else 0.5 * (self.box.x0 + self.box.x1)
        return c.text(
            x,
            self.box.y0 - c.pt(TITLE_PAD_PT),
            text,
            size_pt=size_pt,
            ha="left" if loc == "left" else "center",
            va="baseline",
        )
