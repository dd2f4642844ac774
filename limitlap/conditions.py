"""Track conditions: the names ``dry``, ``damp`` and ``wet`` as grip scales.

Every command that takes ``--grip`` takes a condition name or a number (docs/formats.md,
Vehicle files: the grip scale); this is the one place that reads them. It imports
nothing heavy, so the command line checks ``--grip`` while it parses.
"""

from __future__ import annotations

from collections.abc import Mapping

from limitlap.errors import LimitlapError
from limitlap.vehicle import GRIP_SCALE_MAX, GRIP_SCALE_MIN, check_grip_scale

#: Default grip scales of the named conditions. Common practice, no published source:
#: a damp track and intermediate tyres are usually put at 0.8-0.9 of dry grip, rain
#: tyres on a wet track at 0.6-0.75. For comparison, a road-tyre handbook table (Bosch
#: Automotive Handbook, new tyre, about 0.2 mm of water) gives wet/dry friction of about
#: 0.73-0.76; racing wets on a flooded track can be much lower. Override with your own.
CONDITIONS: dict[str, float] = {"dry": 1.0, "damp": 0.85, "wet": 0.70}


def resolve_condition(
    condition: str | float, conditions: Mapping[str, float] | None = None
) -> tuple[str | None, float]:
    """A condition name or a number as (name, grip scale).

    Parameters
    ----------
    condition : str or float
        'dry', 'damp', 'wet' (or a name of ``conditions``), or a grip scale. [-]
    conditions : mapping, optional
        Names to grip scales, overriding :data:`CONDITIONS`. [-]

    Returns
    -------
    tuple
        (name or None, grip scale checked to 0.2-2.0).

    Examples
    --------
    >>> resolve_condition("wet")
    ('wet', 0.7)
    >>> resolve_condition(0.9)
    (None, 0.9)
    """
    table = dict(CONDITIONS if conditions is None else conditions)
    if isinstance(condition, str):
        key = condition.strip().lower()
        if key in table:
            return key, check_grip_scale(table[key])
        try:
            float(key)
        except ValueError:
            names = ", ".join(table)
            raise LimitlapError(
                f"unknown condition '{condition}' (use {names} or a grip scale "
                f"{GRIP_SCALE_MIN}-{GRIP_SCALE_MAX})"
            ) from None
        return None, check_grip_scale(key)
    return None, check_grip_scale(condition)


def condition_text(condition: str | float) -> str:
    """How outputs name a condition: its name in lower case, else the number as given.

    >>> condition_text("Wet"), condition_text(" 0.9"), condition_text(0.85)
    ('wet', '0.9', '0.85')
    """
    if isinstance(condition, str):
        return condition.strip().lower()
    return f"{float(condition):g}"
