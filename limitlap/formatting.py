"""How numbers are written for people: lap times, time left, speeds, distances, blanks.

The one place for each display rule, used by the terminal (:mod:`limitlap.cli`), the
report page, the figures, the target sheets and the driver's advice lines, so that a
number reads the same everywhere. Values are rounded first and only then split into
minutes and seconds, so a lap of 119.9996 s reads ``2:00.000``, never ``1:60.000``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from limitlap.units import FT_TO_M, KMH_TO_M_S, MPH_TO_M_S

#: What every output for people shows for a value that is not known or has no such
#: point (a corner taken without braking): one blank everywhere. CSV cells stay empty
#: and JSON has null. [-]
NOT_AVAILABLE = "—"
#: The same blank, under the name the target tables used. [-]
NO_POINT = NOT_AVAILABLE


def _known(x) -> bool:
    return x is not None and math.isfinite(x)


def lap_time(time_s, decimals: int = 3) -> str:
    """A lap or segment time as ``m:ss.sss`` (``decimals`` places), rounded first.

    Parameters
    ----------
    time_s : float or None
        Time. [s]
    decimals : int
        Decimal places of the seconds. [-]

    Returns
    -------
    str
        ``m:ss.sss``; :data:`NOT_AVAILABLE` when unknown.

    Examples
    --------
    >>> lap_time(92.4056), lap_time(59.9996), lap_time(119.9996), lap_time(45.1234)
    ('1:32.406', '1:00.000', '2:00.000', '0:45.123')
    >>> lap_time(119.996, decimals=2), lap_time(float("nan"))
    ('2:00.00', '—')
    """
    if not _known(time_s):
        return NOT_AVAILABLE
    scale = 10**decimals
    units = round(float(time_s) * scale)  # whole units of the last place shown
    sign = "-" if units < 0 else ""
    minutes, rest = divmod(abs(units), 60 * scale)
    width = 3 + decimals if decimals else 2
    return f"{sign}{minutes}:{rest / scale:0{width}.{decimals}f}"


def hundredths(time_s: float) -> float:
    """A time as shown to 0.01 s: exactly 0 when it rounds to 0.00, so no "-0.00". [s].

    >>> hundredths(-0.004), hundredths(-0.012)
    (0.0, -0.012)
    """
    return 0.0 if math.isfinite(time_s) and round(time_s, 2) == 0 else time_s


def time_left(time_s) -> str:
    """A time left (or gained) to 0.01 s; never ``-0.00``; :data:`NOT_AVAILABLE` if unknown.

    >>> time_left(-0.004), time_left(-0.012), time_left(0.4849), time_left(None)
    ('0.00', '-0.01', '0.48', '—')
    """
    if not _known(time_s):
        return NOT_AVAILABLE
    return f"{hundredths(time_s):.2f}"


def number(x, spec: str, unit: str = "", blank: str = NOT_AVAILABLE) -> str:
    """``x`` in the format ``spec`` followed by ``unit``; ``blank`` when unknown.

    >>> number(88.76, ".1f", " km/h"), number(None, ".0f"), number(float("nan"), ".0f", blank="-")
    ('88.8 km/h', '—', '-')
    """
    return blank if not _known(x) else f"{x:{spec}}{unit}"


def metres(distance_m: float) -> str:
    """A distance (its size) to the metre: ``12 m``.

    >>> metres(-11.6)
    '12 m'
    """
    return f"{abs(distance_m):.0f} m"


#: Km/h per m/s (3.6, exact): kept here so that formatting imports nothing heavy. [-]
_KMH_PER_M_S = 3.6


def speed_kmh(v_m_s, units=None) -> str:
    """A speed for people: whole km/h (or mph with ``units``), the one rounding of every output; no unit. "—" if unknown.

    >>> speed_kmh(24.69), speed_kmh(None), speed_kmh(24.69, units_named("imperial"))
    ('89', '—', '55')
    """
    if units is not None and _known(v_m_s):
        return number(units.speed_value(v_m_s), ".0f")
    return number(None if not _known(v_m_s) else v_m_s * _KMH_PER_M_S, ".0f")


def distance(distance_m, units=None) -> str:
    """A distance along the lap for people: whole metres (or feet with ``units``), no unit. "—" if unknown.

    >>> distance(359.44), distance(float("nan")), distance(3.048, units_named("imperial"))
    ('359', '—', '10')
    """
    if units is not None and _known(distance_m):
        return number(units.distance_value(distance_m), ".0f")
    return number(distance_m, ".0f")


def brake_points(points, units=None, blank: str = NOT_AVAILABLE) -> str:
    """Brake points for people: each as :func:`distance`, joined by "+"; ``blank`` without one.

    >>> brake_points([2785.6, 2920.9]), brake_points([])
    ('2786 + 2921', '—')
    """
    pts = [distance(x, units) for x in (points or [])]
    return " + ".join(pts) if pts else blank


def seconds(time_s) -> str:
    """A segment time for people: 0.01 s, no unit. "—" if unknown.

    >>> seconds(11.1114)
    '11.11'
    """
    return number(time_s, ".2f")


def percent(share) -> str:
    """A share 0-1 for people: whole percent with its sign. "—" if unknown.

    >>> percent(0.954)
    '95 %'
    """
    return number(None if not _known(share) else 100.0 * share, ".0f", " %")


def grip_used(share, raw=None) -> str:
    """A corner's grip used for people: whole percent; "over" when the lap went outside.

    ``raw`` is the value before clipping: more than 2 % above 1 (beyond the scatter of a
    corner's usage under logger noise of about 0.03 g on 1.4 g) it is shown, marked
    "over". "—" if unknown.

    >>> grip_used(0.954), grip_used(1.0, 1.26)
    ('95 %', '126 % over')
    """
    if _known(raw) and raw > 1.02:
        return f"{percent(raw)} over"
    return percent(share)


def grip(scale) -> str:
    """A grip scale or estimate for people: two decimals. "—" if unknown.

    >>> grip(0.85)
    '0.85'
    """
    return number(scale, ".2f")


def with_band(value, band, unit: str = " s", decimals: int = 2) -> str:
    """A value with its band as ``0.48 ± 0.05 s``: the ± is the larger of the band's two sides rounded up, so the range shown holds the whole band (a bootstrap band need not be centred on the value).

    Without a band (None) the value alone; :data:`NOT_AVAILABLE` when the value is unknown.

    >>> with_band(0.4849, (0.44, 0.51)), with_band(-0.004, (-0.02, 0.011)), with_band(0.2, None)
    ('0.48 ± 0.05 s', '0.00 ± 0.02 s', '0.20 s')
    """
    if not _known(value):
        return NOT_AVAILABLE
    shown = f"{hundredths(value) if decimals == 2 else value:.{decimals}f}"
    if band is None or not all(_known(b) for b in band):
        return f"{shown}{unit}"
    half = max(value - band[0], band[1] - value, 0.0)
    step = 10.0**-decimals
    half = math.ceil(half / step - 1e-9) * step  # rounded up: the range shown holds the band
    return f"{shown} ± {half:.{decimals}f}{unit}"


def band_range(band, unit: str = " s", decimals: int = 2) -> str:
    """A band as ``0.44 to 0.51 s``; :data:`NOT_AVAILABLE` when unknown.

    >>> band_range((0.4412, 0.5149)), band_range(None)
    ('0.44 to 0.51 s', '—')
    """
    if band is None or not all(_known(b) for b in band):
        return NOT_AVAILABLE
    lo, hi = (hundredths(b) if decimals == 2 else b for b in band)
    return f"{lo:.{decimals}f} to {hi:.{decimals}f}{unit}"


# --------------------------------------------------------------------------- units


@dataclass(frozen=True)
class Units:
    """How speeds and distances are shown to people: ``metric`` (km/h, m) or ``imperial`` (mph, ft).

    Files for programs (summary.json, CSV, TOML) keep their documented units; this is for
    the terminal, the report page, its pictures and the target sheets only.

    Attributes
    ----------
    name : str
        ``"metric"`` or ``"imperial"``.
    speed : str
        Speed unit shown: ``"km/h"`` or ``"mph"``.
    distance : str
        Distance unit shown: ``"m"`` or ``"ft"``.
    m_s_per_speed : float
        Metres per second in one shown speed unit. [m/s]
    m_per_distance : float
        Metres in one shown distance unit. [m]
    """

    name: str
    speed: str
    distance: str
    m_s_per_speed: float
    m_per_distance: float

    def speed_value(self, v_m_s):
        """A speed in the shown unit (arrays too). [km/h or mph]."""
        return v_m_s / self.m_s_per_speed

    def distance_value(self, d_m):
        """A distance in the shown unit (arrays too). [m or ft]."""
        return d_m / self.m_per_distance

    def speed_text(self, v_m_s, spec: str = ".0f", blank: str = NOT_AVAILABLE) -> str:
        """A speed with its unit: ``"88 km/h"``; ``blank`` when unknown."""
        return number(
            None if not _known(v_m_s) else self.speed_value(v_m_s), spec, " " + self.speed, blank
        )

    def distance_text(self, d_m, spec: str = ".0f", blank: str = NOT_AVAILABLE) -> str:
        """A distance with its unit: ``"120 m"``; ``blank`` when unknown."""
        return number(
            None if not _known(d_m) else self.distance_value(d_m), spec, " " + self.distance, blank
        )


#: The unit systems a person can choose (``--units``). Exact factors: km/h and mph by
#: definition (SI brochure; international yard and pound agreement, 1959), as in
#: :mod:`limitlap.units`.
UNIT_SYSTEMS = {
    "metric": Units("metric", "km/h", "m", KMH_TO_M_S, 1.0),
    "imperial": Units("imperial", "mph", "ft", MPH_TO_M_S, FT_TO_M),
}


def units_named(name: str) -> Units:
    """The unit system called ``name`` (``metric`` or ``imperial``).

    >>> units_named("imperial").speed_text(100 * 0.44704)
    '100 mph'
    >>> units_named("metric").distance_text(12.4), units_named("imperial").distance_text(3.048)
    ('12 m', '10 ft')
    """
    try:
        return UNIT_SYSTEMS[str(name).strip().lower()]
    except KeyError:
        raise ValueError(f"units must be one of {', '.join(UNIT_SYSTEMS)}, not '{name}'") from None


#: The default: km/h and m.
METRIC = UNIT_SYSTEMS["metric"]


def signed_time(time_s) -> str:
    """A time left with its sign, to 0.01 s: ``+0.48``, ``-0.12``, ``0.00``; never ``-0.00``.

    >>> signed_time(0.4849), signed_time(-0.012), signed_time(-0.004), signed_time(None)
    ('+0.48', '-0.01', '0.00', '—')
    """
    if not _known(time_s):
        return NOT_AVAILABLE
    t = hundredths(time_s)
    return "0.00" if t == 0 else f"{t:+.2f}"
