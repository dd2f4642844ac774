"""Tiny synthetic session logs with analytically known truth, written as CSV text."""

import math

import numpy as np
import pymap3d

#: An invented spot in open country for WGS84 logs (no circuit there). [deg, deg, m]
ORIGIN = (-35.2, 139.8, 50.0)


def csv_text(columns, sep=",", decimal_comma=False, newline="\n", fmt="{:.9g}"):
    """CSV text from ``{header: array}``; NaN cells are left blank."""
    header = sep.join(columns)
    arrays = list(columns.values())
    lines = [header]
    for i in range(len(arrays[0])):
        cells = []
        for a in arrays:
            v = a[i]
            if isinstance(v, float | np.floating) and math.isnan(v):
                cells.append("")
            else:
                cell = fmt.format(v)
                cells.append(cell.replace(".", ",") if decimal_comma else cell)
        lines.append(sep.join(cells))
    return newline.join(lines) + newline


class Circle:
    """A car driving counter-clockwise round a circle of ``radius_m`` about (0, 0), speed
    ``v0 + accel t``, starting at angle ``theta0``; sampled at ``imu_hz`` with GPS fixes
    every ``1/gps_hz`` (phase ``gps_phase``) and blanks between.

    Truth: arc length s(t) = v0 t + a t²/2, angle theta = theta0 + s / R.
    """

    def __init__(
        self,
        radius_m=100.0,
        v0=25.0,
        accel=0.0,
        duration_s=90.0,
        imu_hz=100,
        gps_hz=10,
        gps_phase_s=0.03,
        theta0=-1.0,
        noise_m=0.0,
        seed=1,
    ):
        self.radius_m, self.v0, self.accel, self.theta0 = radius_m, v0, accel, theta0
        n = round(duration_s * imu_hz) + 1
        self.t = np.arange(n) / imu_hz
        s = v0 * self.t + 0.5 * accel * self.t**2
        theta = theta0 + s / radius_m
        self.speed = v0 + accel * self.t
        self.x_true = radius_m * np.cos(theta)
        self.y_true = radius_m * np.sin(theta)
        # ISO 8855: left (counter-clockwise) turn has + yaw rate and + lateral acceleration.
        self.yaw_rate = self.speed / radius_m
        self.accel_lat = self.speed**2 / radius_m
        rng = np.random.default_rng(seed)
        step = round(imu_hz / gps_hz)
        fix = np.zeros(n, dtype=bool)
        fix[round(gps_phase_s * imu_hz) :: step] = True
        self.fix = fix
        self.x = np.where(fix, self.x_true + noise_m * rng.standard_normal(n), np.nan)
        self.y = np.where(fix, self.y_true + noise_m * rng.standard_normal(n), np.nan)

    def drop_gps(self, t0, t1):
        """Remove the fixes with t0 < t < t1 (a dropout)."""
        gone = (self.t > t0) & (self.t < t1)
        self.x[gone] = np.nan
        self.y[gone] = np.nan
        self.fix &= ~gone

    def crossing_times(self, gate_angle=0.0):
        """Times the car passes ``gate_angle`` (closed form of s(t) = R (angle - theta0 + 2 pi k))."""
        out = []
        k = 0
        s_end = self.v0 * self.t[-1] + 0.5 * self.accel * self.t[-1] ** 2
        while True:
            s = self.radius_m * (gate_angle - self.theta0 + 2 * math.pi * k)
            if s > s_end:
                return np.array(out)
            if s >= 0:
                if self.accel == 0:
                    out.append(s / self.v0)
                else:
                    out.append((-self.v0 + math.sqrt(self.v0**2 + 2 * self.accel * s)) / self.accel)
            k += 1

    def geodetic(self):
        """The fixes as WGS84 latitude/longitude (pymap3d ENU -> geodetic at ORIGIN)."""
        lat, lon, _ = pymap3d.enu2geodetic(self.x, self.y, 0.0, *ORIGIN)
        return np.where(self.fix, lat, np.nan), np.where(self.fix, lon, np.nan)

    def columns(self, planar=False, speed_unit="m/s"):
        factor = {"m/s": 1.0, "km/h": 3.6}[speed_unit]
        cols = {
            "time [s]": self.t,
            f"speed [{speed_unit}]": self.speed * factor,
            "yaw_rate [rad/s]": self.yaw_rate,
            "accel_lat [m/s^2]": self.accel_lat,
        }
        if planar:
            cols["x [m]"], cols["y [m]"] = self.x, self.y
        else:
            cols["latitude [deg]"], cols["longitude [deg]"] = self.geodetic()
            cols["altitude [m]"] = np.where(self.fix, ORIGIN[2], np.nan)
        return cols

    def write(self, path, planar=False, **kw):
        path.write_text(csv_text(self.columns(planar=planar), fmt="{:.10f}", **kw))
        return path
