"""The vehicle: a point mass with a tyre-friction envelope, power, drag and downforce."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from limitlap.errors import LimitlapError
from limitlap.units import RHO_ISA_KG_M3

#: Valid range of the grip scale k (docs/formats.md, Vehicle files).
GRIP_SCALE_MIN = 0.2
GRIP_SCALE_MAX = 2.0

#: Largest friction coefficient and combined-slip exponent a vehicle may have: the
#: envelope fit's own bounds (so every envelope.toml it writes reads back), far beyond
#: any tyre (racing slicks about 1.5-2). Common practice, no published source. [-]
GRIP_COEFF_MAX = 8.0
EXPONENT_MAX = 10.0

#: Air densities a circuit can have: ISO 2533's standard atmosphere gives 0.74 kg/m³ at
#: 5,000 m and 1.23 at sea level; 0.5-1.6 leaves room for weather. [kg/m³]
#: Common practice, no published source.
AIR_DENSITY_RANGE_KG_M3 = (0.5, 1.6)


@dataclass(frozen=True)
class Vehicle:
    """Point-mass vehicle of docs/formats.md (Vehicle files), all SI.

    Attributes
    ----------
    name : str
        Free text.
    mass_kg : float
        Mass. [kg]
    power_w : float
        Peak power at the wheels; ``inf`` for "never power-limited". [W]
    drag_area_m2, downforce_area_m2 : float
        Cd·A and Cl·A (+ = downforce). [m²]
    rolling_coeff : float
        Rolling-resistance coefficient Crr. [-]
    air_density_kg_m3 : float
        Air density; ISA sea level (ISO 2533) by default. [kg/m³]
    mu_lat, mu_brk, mu_trac : float or None
        Tyre friction coefficients, lateral, braking, driving; ``None`` when the vehicle
        file has no ``[grip]`` table and the envelope is to be fitted from a log. [-]
    exponent : float or None
        Combined-slip exponent n; 2 = friction ellipse. [-]
    """

    name: str
    mass_kg: float
    power_w: float | None = None
    drag_area_m2: float | None = None
    downforce_area_m2: float | None = None
    rolling_coeff: float | None = None
    air_density_kg_m3: float = RHO_ISA_KG_M3
    mu_lat: float | None = None
    mu_brk: float | None = None
    mu_trac: float | None = None
    exponent: float | None = None

    @property
    def has_grip(self) -> bool:
        """True when all four envelope-shape values are known."""
        return None not in (self.mu_lat, self.mu_brk, self.mu_trac, self.exponent)

    @property
    def is_complete(self) -> bool:
        """True when every value the solver needs is known."""
        return self.has_grip and None not in (
            self.power_w,
            self.drag_area_m2,
            self.downforce_area_m2,
            self.rolling_coeff,
        )

    def require_complete(self) -> Vehicle:
        """Return self, or raise when a value the solver needs is missing."""
        if not self.is_complete:
            missing = [
                k
                for k in (
                    "power_w",
                    "drag_area_m2",
                    "downforce_area_m2",
                    "rolling_coeff",
                    "mu_lat",
                    "mu_brk",
                    "mu_trac",
                    "exponent",
                )
                if getattr(self, k) is None
            ]
            raise LimitlapError(f"vehicle '{self.name}' lacks {', '.join(missing)}")
        return self

    def scaled(self, grip_scale: float) -> Vehicle:
        """The same car on a track whose grip is ``grip_scale`` times as high.

        Only the three friction coefficients change; power, drag and downforce stay
        (docs/formats.md, Vehicle files).

        Parameters
        ----------
        grip_scale : float
            Grip scale k, 0.2 ≤ k ≤ 2.0. [-]

        Returns
        -------
        Vehicle
        """
        check_grip_scale(grip_scale)
        if not self.has_grip:
            raise LimitlapError(f"vehicle '{self.name}' has no grip values to scale")
        return replace(
            self,
            mu_lat=self.mu_lat * grip_scale,
            mu_brk=self.mu_brk * grip_scale,
            mu_trac=self.mu_trac * grip_scale,
        )


def check_grip_scale(grip_scale: float) -> float:
    """Return ``grip_scale`` as a float, or raise when it is outside 0.2-2.0.

    The range is docs/formats.md's (Vehicle files).
    """
    try:
        k = float(grip_scale)
    except (TypeError, ValueError):
        raise LimitlapError(f"grip scale '{grip_scale}' is not a number") from None
    if not (math.isfinite(k) and GRIP_SCALE_MIN <= k <= GRIP_SCALE_MAX):
        raise LimitlapError(f"grip scale {grip_scale} is outside {GRIP_SCALE_MIN}-{GRIP_SCALE_MAX}")
    return k
