"""Shared test cases: analytic lines, reference cars and the envelope check."""

import math

import numpy as np

from limitlap import limits
from limitlap.line import line_from_curvature
from limitlap.units import V_CAP_M_S
from limitlap.vehicle import Vehicle


def friction_car(mu=1.0, mu_brk=None, mu_trac=None, exponent=2.0, mass_kg=1000.0):
    """A car limited by tyre friction only: no power limit, drag, downforce or rolling."""
    return Vehicle(
        "friction only",
        mass_kg,
        math.inf,
        0.0,
        0.0,
        0.0,
        mu_lat=mu,
        mu_brk=mu if mu_brk is None else mu_brk,
        mu_trac=mu if mu_trac is None else mu_trac,
        exponent=exponent,
    )


#: The example car of docs/checks.md (the invented GT coupe of vehicles/gt_coupe.toml).
EXAMPLE_CAR = Vehicle(
    "example",
    1300.0,
    370e3,
    0.75,
    1.10,
    0.012,
    1.225,
    mu_lat=1.45,
    mu_brk=1.55,
    mu_trac=1.30,
    exponent=2.0,
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
        r += (
            base_radius_m
            * rng.uniform(-0.12, 0.12)
            / h
            * np.cos(h * t + rng.uniform(0, 2 * math.pi))
        )
    return line_from_xy(r * np.cos(t), r * np.sin(t), spacing_m=1.0)


# Straights ("s", length m) and arcs (radius m, turn deg, +1 left / -1 right). The turns
# add up to +360 deg so the layout closes as a lap. The 20 m straight between the R=90
# and R=70 left-handers makes one corner with two apexes (under the 50 m merge gap).
ARCS_LAYOUT = [
    ("s", 250.0),
    (40.0, 90.0, +1),
    ("s", 150.0),
    (90.0, 60.0, +1),
    ("s", 20.0),
    (70.0, 60.0, +1),
    ("s", 200.0),
    (30.0, 90.0, -1),
    ("s", 120.0),
    (50.0, 150.0, +1),
    ("s", 100.0),
    (120.0, 90.0, +1),
]


def layout_line(layout, ds=1.0, rotate_m=0.0):
    """Closed line of a straights-and-arcs layout and its arcs as (start_m, end_m,
    curvature_1_m); ``rotate_m`` moves the first station (the gate) along the lap."""
    k, arcs, pos = [], [], 0.0
    for piece in layout:
        if piece[0] == "s":
            n = round(piece[1] / ds)
            k += [0.0] * n
        else:
            radius, turn, sign = piece
            n = round(radius * math.radians(turn) / ds)
            k += [sign / radius] * n
            arcs.append((pos, pos + n * ds, sign / radius))
        pos += n * ds
    k = np.array(k)
    shift = round(rotate_m / ds)
    k = np.roll(k, -shift)
    length = k.size * ds
    arcs = [((a - shift * ds) % length, (b - shift * ds) % length, c) for a, b, c in arcs]
    return line_from_curvature(np.arange(k.size) * ds, k, length_m=length), arcs


def assert_inside_envelope(line, car, k, profile, combined_tol=1e-2):
    """Speeds finite, positive, at most the cap; lateral demand within the lateral limit
    at every station; combined usage of each step within the limit at one of its ends
    (default tolerance 1e-2: a second-order step averages the limits at its two ends, so
    it may use a little more than the limit at one end and less at the other)."""
    v = profile.speed_m_s
    assert v.shape == (line.n,)
    assert np.isfinite(v).all() and (v >= 0).all() and (v <= V_CAP_M_S * (1 + 1e-12)).all()
    # an open line may reach a standstill (a crest climbed at walking pace, a car that
    # coasts to a stop at its end); a lap never stands still
    if line.closed:
        assert (v > 0).all()
    assert np.isfinite(profile.time_s).all() and math.isfinite(profile.lap_time_s)
    scaled = car.scaled(k)
    lateral = np.abs(profile.accel_lat_m_s2) / limits.lateral_limit_m_s2(v, scaled)
    assert lateral.max() <= 1 + 1e-9  # rounding only: the corner limit is solved exactly
    grad = np.asarray(line.gradient, dtype=np.float64)
    sin_grad = grad / np.sqrt(1.0 + grad * grad)
    use_here = limits.combined_usage(
        v, profile.accel_lon_m_s2, profile.accel_lat_m_s2, scaled, sin_grad
    )
    use_next = limits.combined_usage(
        np.roll(v, -1),
        profile.accel_lon_m_s2,
        np.roll(profile.accel_lat_m_s2, -1),
        scaled,
        np.roll(sin_grad, -1),
    )
    both = np.minimum(use_here, use_next)
    if not line.closed:
        both = both[:-1]  # the last station of an open line has no step after it
    assert both.max() <= 1 + combined_tol


def circling_record(duration_s, vehicle=None, fs=100.0, seed=8, noise_m_s2=0.1):
    """A logged-looking record that sweeps the whole envelope, for envelope fits.

    Speed sweeps 12-80 m/s and back every 120 s; the acceleration vector circles the
    envelope of ``vehicle`` (default EXAMPLE_CAR) at 0.3 rev/s on the unit superellipse of
    its exponent, its radius between 0.7 and 1 of the limit (the driving force cut at
    P/v), white noise added (invented test data). Returns (t, v, ax, ay, rng) with the
    generator, so a caller can draw more from the same stream (kerb strikes).
    """
    car = EXAMPLE_CAR if vehicle is None else vehicle
    t = np.arange(0.0, duration_s, 1.0 / fs)
    rng = np.random.default_rng(seed)
    v = 12.0 + 68.0 * np.abs(((t / 120.0) % 1.0) * 2.0 - 1.0)
    th = 2.0 * np.pi * 0.3 * t
    e = car.exponent
    sx = np.sign(np.cos(th)) * np.abs(np.cos(th)) ** (2.0 / e)
    sy = np.sign(np.sin(th)) * np.abs(np.sin(th)) ** (2.0 / e)
    share = 0.85 + 0.15 * np.sin(2.0 * np.pi * 0.037 * t)
    normal = limits.normal_load_n(v, car)
    fx = np.minimum(sx * np.where(sx >= 0, car.mu_trac, car.mu_brk) * normal, car.power_w / v)
    ax = (share * fx - limits.resistance_n(v, car)) / car.mass_kg
    ay = share * sy * car.mu_lat * normal / car.mass_kg
    return t, v, ax + rng.normal(0, noise_m_s2, t.size), ay + rng.normal(0, noise_m_s2, t.size), rng
