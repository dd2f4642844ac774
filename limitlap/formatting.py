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

#: What a table cell shows for a value that is not known. [-]
NOT_AVAILABLE = "n/a"
#: What a target table shows where a corner has no such point (e.g. no braking). [-]
NO_POINT = "—"


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
    ('2:00.00', 'n/a')
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
    ('0.00', '-0.01', '0.48', 'n/a')
    """
    if not _known(time_s):
        return NOT_AVAILABLE
    return f"{hundredths(time_s):.2f}"


def number(x, spec: str, unit: str = "", blank: str = NOT_AVAILABLE) -> str:
    """``x`` in the format ``spec`` followed by ``unit``; ``blank`` when unknown.

    >>> number(88.76, ".1f", " km/h"), number(None, ".0f"), number(float("nan"), ".0f", blank="—")
    ('88.8 km/h', 'n/a', '—')
    """
    return blank if not _known(x) else f"{x:{spec}}{unit}"


def metres(distance_m: float) -> str:
    """A distance (its size) to the metre: ``12 m``.

    >>> metres(-11.6)
    '12 m'
    """
    return f"{abs(distance_m):.0f} m"


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
    ('+0.48', '-0.01', '0.00', 'n/a')
    """
    if not _known(time_s):
        return NOT_AVAILABLE
    t = hundredths(time_s)
    return "0.00" if t == 0 else f"{t:+.2f}"
