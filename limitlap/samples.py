r"""The envelope's samples: chosen, despiked and low-passed, and their noise.

The driver's samples that the grip envelope (:mod:`limitlap.envelope`) and the grip
estimates (:mod:`limitlap.grip`) are measured on: rows of the chosen laps at speed,
spikes replaced by a running median, then a zero-phase Gaussian low-pass (3 Hz by
default; docs/methods.md, Envelope fit). Every width is in seconds or hertz and becomes
samples at the accelerations' own rate: a logger at 5 Hz or at 500 Hz, or accelerations
logged at a lower rate than the rows (blank cells between), are filtered alike in time.
The filtered noise that is left is estimated from the samples' white noise (their
second differences) and the low-pass's kernel, so the fit can take its lift of a high
quantile out.

References
----------
.. [4] A. V. Oppenheim and R. W. Schafer, *Discrete-Time Signal Processing*,
   Prentice Hall (window/kernel smoothing as a zero-phase low-pass; the Gaussian's
   Fourier transform is again a Gaussian -- textbook result, chapter from memory).
"""

from __future__ import annotations

import functools
import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, replace

import numpy as np
from scipy.ndimage import gaussian_filter1d

from limitlap import _kernels
from limitlap.errors import LimitlapError
from limitlap.noise import mad_scale

__all__ = [
    "Selection",
    "filtered_again",
    "filtered_noise",
    "gaussian_sigma_samples",
    "lowpassed_noise",
    "mad_scale",
    "select_samples",
]


@dataclass(frozen=True, eq=False)
class Selection:
    """Samples chosen for the envelope (all arrays as long as the input).

    Attributes
    ----------
    speed_m_s : numpy.ndarray
        Speed, blanks filled where they could be. [m/s]
    accel_lon_m_s2, accel_lat_m_s2 : numpy.ndarray
        Accelerations after spike removal and low-pass filtering (when a sample rate was
        given), + forward and + left. [m/s²]
    used : numpy.ndarray
        True for samples that count. [-]
    n_spikes : int
        Samples rejected as spikes or short transients. [-]
    spike : numpy.ndarray or None
        True for the samples found to be spikes (None without a sample rate). [-]
    noise_parts : tuple or None
        Second differences of the two despiked axes (a subsample) and the low-pass width
        in samples, for :attr:`noise_m_s2`; None without a sample rate.
    sample_rate_hz : float or None
        Rate of the accelerations' own samples (the rows' rate, or lower when they are
        logged on every k-th row only); None without a sample rate. [Hz]
    """

    speed_m_s: np.ndarray
    accel_lon_m_s2: np.ndarray
    accel_lat_m_s2: np.ndarray
    used: np.ndarray
    n_spikes: int = 0
    spike: np.ndarray | None = None
    noise_parts: tuple | None = None
    sample_rate_hz: float | None = None

    @functools.cached_property
    def noise_m_s2(self) -> float:
        """Standard deviation of the sensor noise left in the filtered accelerations (root mean square of the two axes, :func:`filtered_noise` of their second differences, estimated when first asked for); 0 without a sample rate.

        [m/s²].
        """
        if self.noise_parts is None:
            return 0.0
        d2_x, d2_y, sigma = self.noise_parts
        return math.sqrt(
            0.5 * (filtered_noise(d2_x, sigma) ** 2 + filtered_noise(d2_y, sigma) ** 2)
        )

    def within(self, mask) -> Selection:
        """The same selection restricted to the samples where ``mask`` is True (the result of :func:`select_samples` given that mask: filtering does not look at it)."""
        keep = np.asarray(mask, dtype=bool)
        if keep.shape != self.used.shape:
            raise LimitlapError(f"sample mask has shape {keep.shape}, expected {self.used.shape}")
        n_spikes = self.n_spikes if self.spike is None else int((self.spike & keep).sum())
        return replace(self, used=self.used & keep, n_spikes=n_spikes)


def _as_1d(name, values, n=None):
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim != 1:
        raise LimitlapError(f"{name} must be a 1-D array")
    if n is not None and arr.shape[0] != n:
        raise LimitlapError(f"{name} has {arr.shape[0]} samples, expected {n}")
    return arr


def _fill_gaps(values):
    """Linear interpolation over the index across interior blanks (NaN)."""
    out = values.copy()
    ok = np.isfinite(out)
    if ok.sum() >= 2 and not ok.all():
        idx = np.arange(out.shape[0])
        first, last = np.flatnonzero(ok)[[0, -1]]
        inner = (~ok) & (idx > first) & (idx < last)
        out[inner] = np.interp(idx[inner], idx[ok], out[ok])
    return out


def _runs(ok):
    """Start and end (exclusive) of the runs of True in a boolean array."""
    padded = np.concatenate(([False], ok, [False])).astype(np.int8)
    edges = np.flatnonzero(np.diff(padded))
    return edges[0::2], edges[1::2]


def gaussian_sigma_samples(cutoff_hz, sample_rate_hz):
    r"""Standard deviation of the Gaussian kernel with a given half-power frequency.

    Parameters
    ----------
    cutoff_hz : float
        Frequency where the power gain is 1/2. [Hz]
    sample_rate_hz : float
        Sample rate. [Hz]

    Returns
    -------
    float
        Kernel standard deviation in samples. [-]

    Notes
    -----
    The kernel's amplitude response is :math:`H(f) = e^{-2\pi^2\sigma_t^2 f^2}` (Fourier
    transform of a Gaussian [4]_); :math:`H^2 = 1/2` at
    :math:`f_c = \sqrt{\ln 2 / 4}/(\pi\sigma_t)`. A Gaussian is used rather than a
    Butterworth because its kernel is never negative: a smoothed sample is a weighted
    mean of its neighbours and so stays inside the (convex) envelope they lie in, where a
    Butterworth's ringing overshoots a step of acceleration (braking to throttle) and
    puts spurious samples outside it.

    Examples
    --------
    >>> round(gaussian_sigma_samples(3.0, 100.0), 3)
    4.417
    """
    sigma_t = math.sqrt(math.log(2.0) / 4.0) / (math.pi * cutoff_hz)
    return sigma_t * sample_rate_hz


def select_samples(
    speed_m_s,
    accel_lon_m_s2,
    accel_lat_m_s2,
    mask=None,
    *,
    sample_rate_hz=None,
    cutoff_hz=3.0,
    persistence_s=0.3,
    spike_threshold_m_s2=2.0,
    min_speed_m_s=10.0,
) -> Selection:
    """Choose the samples that show sustained grip.

    Parameters
    ----------
    speed_m_s : array-like
        Speed per sample; blanks (NaN) between slower GPS samples are filled by
        linear interpolation over the sample index when ``sample_rate_hz`` is given. [m/s]
    accel_lon_m_s2, accel_lat_m_s2 : array-like
        Longitudinal (+ forward) and lateral (+ left) acceleration per sample. [m/s²]
    mask : array-like of bool, optional
        True for samples on complete laps (out-laps and in-laps excluded); all when
        omitted. [-]
    sample_rate_hz : float, optional
        Uniform sample rate. When given, spikes are removed and the accelerations
        low-pass filtered; without it (e.g. samples on distance stations) neither. [Hz]
    cutoff_hz : float, default 3.0
        Half-power (-3 dB) frequency of the zero-phase Gaussian low-pass [4]_; "a few Hz"
        is common practice, no published source (docs/methods.md, Envelope fit). [Hz]
    persistence_s : float, default 0.3
        Width of the running median: a value must last about half of it to count as
        sustained grip (0.2-0.5 s is common practice, no published source); at least
        three samples, and no spike test at all when three samples span more than twice
        this (below about 5 Hz). [s]
    spike_threshold_m_s2 : float, default 2.0
        A sample further than this from the running median (in either axis) is a spike
        or short transient (kerb strike) and is dropped. Common practice. [m/s²]
    min_speed_m_s : float, default 10.0
        Slower samples (pit lane, stops) are dropped. Common practice. [m/s]

    Returns
    -------
    Selection
        Filtered arrays and the mask of samples used.
    """
    v = _as_1d("speed", speed_m_s)
    n = v.shape[0]
    ax = _as_1d("longitudinal acceleration", accel_lon_m_s2, n).copy()
    ay = _as_1d("lateral acceleration", accel_lat_m_s2, n).copy()
    keep = np.ones(n, bool) if mask is None else np.asarray(mask, dtype=bool)
    if keep.shape != (n,):
        raise LimitlapError(f"sample mask has shape {keep.shape}, expected ({n},)")
    n_spikes = 0
    if sample_rate_hz is not None:
        fs = float(sample_rate_hz)
        if not (math.isfinite(fs) and fs > 0.0):
            raise LimitlapError(f"sample rate {sample_rate_hz} Hz is not a positive number")
        v = _fill_gaps(v)
        finite = np.isfinite(ax) & np.isfinite(ay)
        step = _own_step(finite)
        if step > 1:  # accelerations on every step-th row only: filtered at their own rate
            widths = (cutoff_hz, persistence_s, spike_threshold_m_s2, min_speed_m_s)
            return _on_own_samples(v, ax, ay, keep, finite, fs / step, widths)
        width = max(3, round(persistence_s * fs) | 1)  # odd window
        if width / fs > 2.0 * persistence_s:
            # below about 5 Hz three samples span more than twice the persistence: a
            # sample apart from its neighbours is then the motion, not a kerb strike
            spike_threshold_m_s2 = math.inf
        sigma = gaussian_sigma_samples(cutoff_hz, fs)
        starts, ends = _runs(finite)
        stride = max(1, n // _NOISE_SAMPLES)
        args = (starts, ends, width, sigma, spike_threshold_m_s2, stride)
        if n >= _THREADED_SAMPLES:  # the two channels side by side (the kernels drop the GIL)
            with ThreadPoolExecutor(max_workers=1) as pool:
                later = pool.submit(_despike_and_filter, ay, *args)
                spike_x, res_x = _despike_and_filter(ax, *args)
                spike_y, res_y = later.result()
        else:
            spike_x, res_x = _despike_and_filter(ax, *args)
            spike_y, res_y = _despike_and_filter(ay, *args)
        spike = spike_x | spike_y
        noise = (res_x, res_y, sigma)
        rate = fs
        for a, b in zip(starts, ends, strict=True):
            if not b - a > 8.0 * sigma:
                finite[a:b] = False  # too short to filter: leave out
        n_spikes = int((spike & keep).sum())
        keep = keep & ~spike & finite
    else:
        spike = None
        noise = None
        rate = None
    ok = keep & np.isfinite(v) & np.isfinite(ax) & np.isfinite(ay) & (v >= min_speed_m_s)
    return Selection(v, ax, ay, ok, n_spikes, spike, noise, rate)


def _own_step(finite) -> int:
    """Rows between the accelerations' own samples (1 when they fill the rows). [-]."""
    idx = np.flatnonzero(finite)
    if idx.size < 3:
        return 1
    step = float(np.median(np.diff(idx)))
    return round(step) if step >= 1.5 else 1


def _on_own_samples(v, ax, ay, keep, finite, rate_hz, widths) -> Selection:
    """:func:`select_samples` of the rows that carry accelerations, at their own rate.

    The filtered values sit on those rows; the rows between are blank (NaN, unused).
    """
    idx = np.flatnonzero(finite)
    cutoff_hz, persistence_s, threshold, min_speed = widths
    sub = select_samples(
        v[idx],
        ax[idx],
        ay[idx],
        keep[idx],
        sample_rate_hz=rate_hz,
        cutoff_hz=cutoff_hz,
        persistence_s=persistence_s,
        spike_threshold_m_s2=threshold,
        min_speed_m_s=min_speed,
    )
    n = v.shape[0]
    out_x, out_y = np.full(n, np.nan), np.full(n, np.nan)
    used, spike = np.zeros(n, bool), np.zeros(n, bool)
    out_x[idx], out_y[idx] = sub.accel_lon_m_s2, sub.accel_lat_m_s2
    used[idx], spike[idx] = sub.used, sub.spike
    return Selection(
        v, out_x, out_y, used, sub.n_spikes, spike, sub.noise_parts, sub.sample_rate_hz
    )


#: The noise of the accelerations is estimated from about this many samples (every
#: n-th of a longer record): its standard error is then about 1 %. [-]
_NOISE_SAMPLES = 10_000


def lowpassed_noise(raw_sigma, sigma) -> float:
    r"""Standard deviation of white noise after the Gaussian low-pass of ``sigma`` samples.

    For white noise of standard deviation :math:`\sigma_n` through a kernel of weights
    :math:`w_j` (SciPy's ``gaussian_filter1d``: a Gaussian of ``sigma`` samples truncated
    at 4 sigma, normalised) the low-passed noise has variance
    :math:`\sigma_n^2 \sum_j w_j^2`: about :math:`\sigma_n^2 / (2\sqrt\pi\,s)` for a
    kernel s samples wide, and :math:`\sigma_n^2` when the kernel is narrower than a
    sample (a low rate: nothing left to average). [same as raw_sigma]
    """
    radius = int(4.0 * float(sigma) + 0.5)
    j = np.arange(-radius, radius + 1, dtype=np.float64)
    w = np.exp(-0.5 * (j / max(float(sigma), 1e-12)) ** 2)
    w /= w.sum()
    return float(raw_sigma) * math.sqrt(float(np.sum(w * w)))


def filtered_again(sel: Selection, rows=None):
    r"""The selection's filtered accelerations low-passed once more by the same kernel: (a_x, a_y) at ``rows`` (every row when None), or None without a sample rate.

    Each unbroken stretch of the accelerations' own samples is filtered as
    :func:`select_samples` filtered it (on the rows that carry a value, at their own rate,
    when they sit on every k-th row only); blank rows stay blank. A symmetric kernel of
    variance :math:`s^2` moves a smooth signal :math:`x` by about
    :math:`\tfrac12 s^2 \ddot x` (the leading term of its Taylor expansion), and a second
    pass by the same kernel moves it by about as much again: one pass minus two estimates
    what the low-pass did to each sample, for :func:`limitlap.envelope.fit_envelope`. One
    record-long buffer serves both channels. [m/s²]
    """
    if sel.noise_parts is None:
        return None
    sigma = sel.noise_parts[2]
    buffer = np.empty(sel.used.shape[0])
    out = []
    for a in (sel.accel_lon_m_s2, sel.accel_lat_m_s2):
        finite = np.isfinite(a)
        buffer.fill(np.nan)
        if _own_step(finite) > 1:  # as _on_own_samples: the carrying rows in one stretch
            idx = np.flatnonzero(finite)
            buffer[idx] = gaussian_filter1d(a[idx], sigma, mode="nearest")
        else:
            for s, e in zip(*_runs(finite), strict=True):
                gaussian_filter1d(a[s:e], sigma, mode="nearest", output=buffer[s:e])
        out.append(buffer.copy() if rows is None else buffer[rows])
    return tuple(out)


def filtered_noise(second_differences, sigma):
    r"""Standard deviation of white sensor noise after the Gaussian low-pass, from the despiked samples' second differences.

    White noise of standard deviation :math:`\sigma_n` has second differences of
    variance :math:`6\sigma_n^2`, while a signal slower than the sample rate has small
    ones; their spread is taken as :math:`1.4826\,\mathrm{MAD}` (robust to the few
    samples where the driver's inputs change within a sample or two), which gives
    :math:`\sigma_n` (:func:`limitlap.noise.difference_noise`), and
    :func:`lowpassed_noise` what the low-pass leaves of it. The same at any rate: at
    5 Hz, where the 3 Hz low-pass is narrower than a sample, the noise is all left.
    Returns 0 for no differences. [m/s²]

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> noise = rng.standard_normal(200_000)
    >>> low = gaussian_filter1d(noise, 4.417)
    >>> ratio = filtered_noise(np.diff(noise, n=2), 4.417) / float(np.std(low))
    >>> bool(abs(ratio - 1.0) < 0.02)
    True
    """
    d = np.asarray(second_differences, dtype=np.float64)
    d = d[np.isfinite(d)]
    if d.size == 0:
        return 0.0
    return lowpassed_noise(mad_scale(d) / math.sqrt(6.0), sigma)


#: Records at least this long have their two acceleration channels despiked and filtered
#: in two threads (below it the thread costs more than it saves). [-]
_THREADED_SAMPLES = 50_000


def _despike_and_filter(values, starts, ends, width, sigma, threshold, stride=1):
    """Despike (running median) and low-pass (Gaussian) one channel in place, per stretch.

    A sample further than ``threshold`` from the running median of ``width`` samples is a
    spike: it is replaced by that median before the zero-phase Gaussian low-pass of
    standard deviation ``sigma`` samples; stretches of ``8 sigma`` samples or fewer are
    not filtered (the caller leaves them out). Returns the spike mask and, for the noise
    estimate (:func:`filtered_noise`), the despiked samples' second differences at every
    ``stride``-th sample of the filtered stretches.
    """
    spike = np.zeros(values.shape[0], bool)
    second = []
    for a, b in zip(starts, ends, strict=True):  # one pass per unbroken stretch
        seg = values[a:b]
        spike[a:b] = _kernels.despike(seg, width, float(threshold))  # replaced in place
        if b - a > 8.0 * sigma and b - a >= 3:
            # strided views first: no full-length temporaries on a long record
            second.append(seg[2::stride] - 2.0 * seg[1:-1:stride] + seg[:-2:stride])
            values[a:b] = gaussian_filter1d(seg, sigma, mode="nearest")
    return spike, np.concatenate(second) if second else np.empty(0)
