"""Physical constants and unit conversions: the only place a unit factor lives.

Every factor converts *to* SI. ``ingest`` uses them on the way in, ``report`` on the way
out; the stages in between only ever see SI values.
"""

from __future__ import annotations

#: Standard acceleration of gravity, defined exactly (3rd CGPM, 1901). [m/s²]
G0_M_S2 = 9.80665
#: ISA sea-level air density (ISO 2533:1975, p0 / (R T0) with R = 287.05287). [kg/m³]
RHO_ISA_KG_M3 = 1.225
#: ISA sea-level pressure (ISO 2533:1975). [Pa]
P0_ISA_PA = 101_325.0
#: ISA sea-level temperature (ISO 2533:1975). [K]
T0_ISA_K = 288.15
#: Specific gas constant of dry air as used by ISO 2533. [J/(kg·K)]
R_AIR_J_KG_K = 287.05287
#: Speed cap for points where grip never runs out; far above any car's top speed. [m/s]
V_CAP_M_S = 200.0

# Exact unit definitions (SI brochure, 9th ed.; international yard and pound agreement 1959).
KMH_TO_M_S = 1000.0 / 3600.0
MPH_TO_M_S = 1609.344 / 3600.0
FT_TO_M = 0.3048
DEG_TO_RAD = 3.141592653589793 / 180.0
BAR_TO_PA = 1.0e5
KPA_TO_PA = 1.0e3
PSI_TO_PA = 6894.757293168361  # 1 lbf/in² = 0.45359237 kg · 9.80665 m/s² / 0.0254² m²
KW_TO_W = 1.0e3
MS_TO_S = 1.0e-3

#: Units accepted per channel: unit string -> factor to SI. The first entry is the default
#: when a header gives no unit (docs/formats.md, Log files). ``None`` key means "no unit".
CHANNEL_UNITS: dict[str, dict[str, float]] = {
    "time": {"s": 1.0, "ms": MS_TO_S},
    "latitude": {"deg": 1.0},
    "longitude": {"deg": 1.0},
    "altitude": {"m": 1.0},
    "x": {"m": 1.0},
    "y": {"m": 1.0},
    "speed": {"km/h": KMH_TO_M_S, "m/s": 1.0, "mph": MPH_TO_M_S},
    "accel_lon": {"g": G0_M_S2, "m/s^2": 1.0},
    "accel_lat": {"g": G0_M_S2, "m/s^2": 1.0},
    "yaw_rate": {"deg/s": DEG_TO_RAD, "rad/s": 1.0},
    "throttle": {"%": 0.01, "0-1": 1.0},
    "brake": {"bar": BAR_TO_PA, "kPa": KPA_TO_PA, "psi": PSI_TO_PA},
    "steer": {"deg": DEG_TO_RAD},
    "gear": {"": 1.0},
    "lap": {"": 1.0},
}


def isa_density_kg_m3(pressure_pa: float = P0_ISA_PA, temperature_k: float = T0_ISA_K) -> float:
    """Air density from the ideal-gas law with the ISO 2533 gas constant.

    Parameters
    ----------
    pressure_pa : float
        Static pressure. [Pa]
    temperature_k : float
        Static temperature. [K]

    Returns
    -------
    float
        Density. [kg/m³]

    Examples
    --------
    >>> round(isa_density_kg_m3(), 4)
    1.225
    """
    return pressure_pa / (R_AIR_J_KG_K * temperature_k)
