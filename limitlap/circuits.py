r"""Invented circuits for the demo and the tests, as lines with corner marks.

:func:`demo_circuit` is an invented track, *Tarrowby Heath* (not any real circuit),
built from straights, circular arcs and clothoid transitions (curvature linear in
distance), so curvature is continuous. Its heading and position close exactly: one arc
length is chosen so the bends add up to one full turn, two straight lengths so the end
meets the start. It sits at an invented WGS84 origin. :func:`circle_circuit` is a plain
counter-clockwise circle for quick tests.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pymap3d

from limitlap.errors import LimitlapError
from limitlap.line import Line

# The lengths of "main", "s6", "s9" and of arc "T11b" are nominal: the closure solves them.
_TARROWBY_LABELS = {
    "T1": "Sentry",
    "T2": "Lantern",
    "T3": "Long Mile",
    "T4": "Kettle Hairpin",
    "T5": "Brambles",
    "T6": "Brambles exit",
    "T7": "Weir",
    "T8": "Flick",
    "T9": "Ferrier",
    "T10": "Ferrier exit",
    "T11": "Two Oaks",
    "T12": "Homecoming",
}


@dataclass(frozen=True)
class CornerMark:
    """A named corner of a synthetic circuit.

    Attributes
    ----------
    name : str
        Short name, e.g. ``"T4"``.
    apex_m : float
        Distance of the apex (middle of the tightest arc) from the gate. [m]
    radius_m : float
        Radius of the tightest arc, + left, - right. [m]
    label : str
        Longer invented name, for track files and reports.
    """

    name: str
    apex_m: float
    radius_m: float
    label: str = ""


@dataclass(frozen=True, eq=False)
class Circuit:
    """A synthetic circuit: its line (stations from the gate) and where it is on Earth.

    Attributes
    ----------
    name : str
        Invented name.
    line : Line
        Closed reference line; station 0 is the start/finish gate; x east, y north,
        z up in the ENU frame at ``origin``. [m]
    origin : tuple of float
        ENU origin (latitude deg, longitude deg, ellipsoidal height m).
    corners : tuple of CornerMark
        Corners in driving order from the gate.
    pit_exit_m, pit_entry_m : float
        Where the out-lap starts and the in-lap stops, as distance from the gate. [m]
    """

    name: str
    line: Line
    origin: tuple[float, float, float]
    corners: tuple[CornerMark, ...]
    pit_exit_m: float
    pit_entry_m: float

    @property
    def gate_latlon(self) -> tuple[float, float]:
        """(latitude, longitude) of the gate point, degrees."""
        lat, lon, _ = pymap3d.enu2geodetic(
            self.line.x_m[0], self.line.y_m[0], self.line.z_m[0], *self.origin
        )
        return float(lat), float(lon)

    def corner(self, name: str) -> CornerMark:
        """The corner called ``name``."""
        for c in self.corners:
            if c.name == name:
                return c
        raise LimitlapError(f"circuit '{self.name}' has no corner '{name}'")


def _corner(angle_deg, radius_m, ramp_in_m, ramp_out_m, name):
    """Clothoid in, arc, clothoid out: the arc length makes the turn ``angle_deg``."""
    kappa = math.copysign(1.0 / radius_m, angle_deg)
    hold = math.radians(abs(angle_deg)) * radius_m - 0.5 * (ramp_in_m + ramp_out_m)
    if hold <= 0.0:  # design error, not user input
        raise ValueError(f"corner {name}: transitions longer than the turn")
    return [("ramp", ramp_in_m, kappa), ("arc", hold, name), ("ramp", ramp_out_m, 0.0)]


def _tarrowby_elements(lengths):
    e = [("straight", lengths["main"], "main")]
    e += _corner(-90, 42, 32, 28, "T1")  # right, medium-slow after the main straight
    e += [("straight", 150, "s1")]
    e += _corner(40, 110, 30, 30, "T2")  # left
    e += [("straight", 120, "s2")]
    e += _corner(-40, 250, 60, 60, "T3")  # fast right sweeper
    e += [("straight", 330, "s3")]
    e += _corner(-170, 16, 20, 20, "T4")  # hairpin
    e += [("straight", 140, "s4")]
    e += _corner(40, 30, 14, 14, "T5") + _corner(-45, 30, 14, 14, "T6")  # chicane
    e += [("straight", 110, "s5")]
    e += _corner(85, 75, 30, 30, "T7")  # left
    e += [("straight", lengths["s6"], "s6")]
    e += _corner(10, 500, 40, 40, "T8")  # flat-out kink
    e += [("straight", 150, "s7")]
    e += [*_corner(-35, 140, 30, 30, "T9"), ("straight", 60, "s7b")]
    e += _corner(35, 170, 30, 30, "T10")
    e += [("straight", 100, "s8")]
    # same-direction double apex: tighten, open up, tighten again
    e += [("ramp", 22, -1 / 50), ("arc", 20, "T11"), ("ramp", 20, -1 / 140)]
    e += [("arc", 25, "T11 middle"), ("ramp", 20, -1 / 45), ("arc", lengths["T11b"], "T11b")]
    e += [("ramp", 28, 0.0), ("straight", lengths["s9"], "s9")]
    e += _corner(-90, 80, 35, 40, "T12")  # onto the main straight
    return e


def _knots(elements):
    """Piecewise-linear curvature as knots (s, kappa) and each element's span."""
    s_knots, k_knots, spans = [0.0], [0.0], []
    s, k = 0.0, 0.0
    for kind, length, arg in elements:
        if kind == "straight":
            k_end = k_start = 0.0
        elif kind == "ramp":
            k_start, k_end = k, arg
        else:
            k_start = k_end = k
        spans.append((kind, arg, s, s + length, k_start, k_end))
        s += length
        k = k_end
        s_knots.append(s)
        k_knots.append(k_end)
    return np.array(s_knots), np.array(k_knots), spans


def _integrate(s_knots, k_knots, step_m):
    """Heading and position by the trapezoidal rule on a fine grid from the knots."""
    length = s_knots[-1]
    s = np.linspace(0.0, length, round(length / step_m) + 1)
    s = np.union1d(s, s_knots)  # knots on the grid: the trapezoid is exact on the heading
    k = np.interp(s, s_knots, k_knots)
    ds = np.diff(s)
    psi = np.concatenate([[0.0], np.cumsum(0.5 * (k[1:] + k[:-1]) * ds)])
    x = np.concatenate([[0.0], np.cumsum(0.5 * (np.cos(psi[1:]) + np.cos(psi[:-1])) * ds)])
    y = np.concatenate([[0.0], np.cumsum(0.5 * (np.sin(psi[1:]) + np.sin(psi[:-1])) * ds)])
    return s, k, psi, x, y


def _close(elements_of, lengths, hold_name, hold_kappa, straights, turn_rad, step_m):
    """Solve one arc length (heading) and two straight lengths (position) for closure."""
    lengths = dict(lengths)
    for _ in range(2):
        s_kn, k_kn, _sp = _knots(elements_of(lengths))
        total_turn = np.sum(0.5 * (k_kn[1:] + k_kn[:-1]) * np.diff(s_kn))
        lengths[hold_name] += (turn_rad - total_turn) / hold_kappa  # exact: turn is linear in it
        s, _k, psi, x, y = _integrate(*_knots(elements_of(lengths))[:2], step_m)
        spans = _knots(elements_of(lengths))[2]
        cols = []
        for name in straights:
            start = next(sp[2] for sp in spans if sp[0] == "straight" and sp[1] == name)
            heading = np.interp(start, s, psi)
            cols.append([math.cos(heading), math.sin(heading)])  # d(end)/d(length)
        delta = np.linalg.solve(np.array(cols).T, -np.array([x[-1], y[-1]]))
        for name, d in zip(straights, delta, strict=True):
            lengths[name] += float(d)
    if min(lengths.values()) <= 0.0:  # design error
        raise ValueError(f"circuit closure gave a non-positive length: {lengths}")
    return lengths


def demo_circuit(spacing_m: float = 1.0, *, elevation: bool = True) -> Circuit:
    """The invented demo circuit *Tarrowby Heath* (about 3.6 km, 12 corners, clockwise).

    Corners in driving order: a medium right after the main straight (T1), a left (T2),
    a fast right sweeper (T3), a hairpin (T4), a left-right chicane (T5/T6), a left (T7),
    a flat-out kink (T8), a right-left pair (T9/T10), a same-direction double-apex right
    (T11, apexes ``T11`` and ``T11b``) and the last right onto the main straight (T12). Curvature is piecewise linear in
    distance (clothoid transitions), so it is continuous everywhere.

    Parameters
    ----------
    spacing_m : float
        Station spacing of the line (rounded to a whole number of stations). [m]
    elevation : bool
        Add a gentle height profile (two harmonics, grades below about 2 %).

    Returns
    -------
    Circuit
        The line starts at the gate on the main straight.

    Examples
    --------
    >>> c = demo_circuit()
    >>> 3000 < c.line.length_m < 4000, len(c.corners)
    (True, 13)
    """
    step = 0.05  # fine integration step [m]; position error O(step²) ~ 1e-5 m per lap
    nominal = {"main": 720.0, "s6": 100.0, "s9": 300.0, "T11b": 15.0}
    lengths = _close(_tarrowby_elements, nominal, "T11b", -1 / 45, ("s6", "s9"), -2 * math.pi, step)
    s_kn, k_kn, spans = _knots(_tarrowby_elements(lengths))
    s_f, _k_f, _psi_f, x_f, y_f = _integrate(s_kn, k_kn, step)
    length = float(s_f[-1])
    # Gate 250 m down the main straight; rotate the layout 25° and place it in ENU.
    gate_s = 250.0
    n_st = max(8, round(length / spacing_m))
    st = np.arange(n_st) * (length / n_st)
    s_design = (st + gate_s) % length
    # closure residual of the numerical integration (~1e-5 m) spread linearly
    xf = x_f - s_f / length * x_f[-1]
    yf = y_f - s_f / length * y_f[-1]
    x0, y0 = np.interp(s_design, s_f, xf), np.interp(s_design, s_f, yf)
    kappa = np.interp(s_design, s_kn, k_kn)
    rot = math.radians(25.0)
    cx, cy = -380.0, 320.0  # ENU offset of the design frame [m], invented
    x = cx + math.cos(rot) * x0 - math.sin(rot) * y0
    y = cy + math.sin(rot) * x0 + math.cos(rot) * y0
    if elevation:
        w = 2 * math.pi / length
        z = 6.0 * np.sin(w * st + 0.8) + 2.5 * np.sin(2 * w * st + 2.1)
        grad = 6.0 * w * np.cos(w * st + 0.8) + 2.5 * 2 * w * np.cos(2 * w * st + 2.1)
    else:
        z, grad = np.zeros(n_st), np.zeros(n_st)
    line = Line(st, kappa, grad, length, True, x, y, z, {"name": "Tarrowby Heath"})
    corners = []
    for kind, name, s0, s1, k0, _k1 in spans:
        if kind == "arc" and (name in _TARROWBY_LABELS or name == "T11b"):
            apex = ((s0 + s1) / 2 - gate_s) % length
            label = _TARROWBY_LABELS.get(name, "Two Oaks, second apex")
            corners.append(CornerMark(name, float(apex), float(1.0 / k0), label))
    corners.sort(key=lambda c: c.apex_m)
    return Circuit(
        name="Tarrowby Heath",
        line=line,
        origin=(-33.8612, 147.2391, 286.0),  # invented location
        corners=tuple(corners),
        pit_exit_m=90.0,
        pit_entry_m=length - 120.0,
    )


def circle_circuit(radius_m: float = 100.0, spacing_m: float = 1.0) -> Circuit:
    """A counter-clockwise circle (left-hand, + curvature), for quick tests.

    Parameters
    ----------
    radius_m : float
        Radius. [m]
    spacing_m : float
        Station spacing. [m]

    Returns
    -------
    Circuit
        Centre at the ENU origin, gate at (radius, 0) heading north.
    """
    length = 2 * math.pi * radius_m
    n_st = max(16, round(length / spacing_m))
    st = np.arange(n_st) * (length / n_st)
    ang = st / radius_m
    line = Line(
        st,
        np.full(n_st, 1.0 / radius_m),
        np.zeros(n_st),
        length,
        True,
        radius_m * np.cos(ang),
        radius_m * np.sin(ang),
        np.zeros(n_st),
        {"name": f"circle R={radius_m:g} m"},
    )
    corner = CornerMark("C1", length / 2, radius_m, "circle")
    return Circuit(
        f"circle R={radius_m:g} m",
        line,
        (-33.8612, 147.2391, 286.0),
        (corner,),
        pit_exit_m=0.1 * length,
        pit_entry_m=0.9 * length,
    )
