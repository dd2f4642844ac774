"""Shared test cases: analytic lines and reference cars."""

import math

import numpy as np


from limitlap.line import line_from_curvature
from limitlap.vehicle import Vehicle


def friction_car(mu=1.0, mu_brk=None, mu_trac=None, exponent=2.0, mass_kg=1000.0):
    """A car limited by tyre friction only: no power limit, drag, downforce or rolling."""
    return Vehicle(
        "friction only", mass_kg, math.inf, 0.0, 0.0, 0.0,
        mu_lat=mu, mu_brk=mu if mu_brk is None else mu_brk,
        mu_trac=mu if mu_trac is None else mu_trac, exponent=exponent,
    )


#: The example vehicle of INTERFACE §3 (REFERENCES: "the example vehicle").
EXAMPLE_CAR = Vehicle(
    "example", 1300.0, 370e3, 0.75, 1.10, 0.012, 1.225,
    mu_lat=1.45, mu_brk=1.55, mu_trac=1.30, exponent=2.0,
)


def stadium(straight_m=200.0, radius_m=50.0, ds_m=0.5):
    """Closed stadium: straight, half circle, straight, half circle (left-hand)."""
    n1 = round(straight_m / ds_m)
    n2 = round(math.pi * radius_m / ds_m)
    k = np.concatenate([np.zeros(n1), np.full(n2, 1 / radius_m)] * 2)
    ds = np.concatenate([np.full(n1, straight_m / n1), np.full(n2, math.pi * radius_m / n2)] * 2)
    s = np.concatenate([[0.0], np.cumsum(ds)[:-1]])
    return line_from_curvature(s, k, length_m=float(ds.sum()))


def circle(radius_m, n=720):
    length = 2 * math.pi * radius_m
    s = np.arange(n) * (length / n)
    return line_from_curvature(s, np.full(n, 1 / radius_m), length_m=length)


def straight(length_m, ds_m=0.1):
    n = round(length_m / ds_m) + 1
    s = np.linspace(0.0, length_m, n)
    return line_from_curvature(s, np.zeros(n), closed=False)


def random_smooth_loop(seed, n=1200, base_radius_m=180.0):
    """A random smooth closed line from a few Fourier terms of the polar radius."""
    from limitlap.line import line_from_xy

    rng = np.random.default_rng(seed)
    t = np.linspace(0, 2 * math.pi, n, endpoint=False)
    r = np.full(n, base_radius_m)
    for h in range(2, 6):
        r += base_radius_m * rng.uniform(-0.12, 0.12) / h * np.cos(h * t + rng.uniform(0, 2 * math.pi))
    return line_from_xy(r * np.cos(t), r * np.sin(t), spacing_m=1.0)
