"""Scalar observables from a measured discharge-current trace.

A probe or shunt records the discharge current :math:`I(t)` at a fixed sample
rate. Calibrations compare the model with three numbers taken from it: the mean
current, the rms amplitude of its oscillation and the dominant oscillation
frequency. :func:`summarize_trace` derives all three, with 1-sigma
uncertainties, from a trace; :func:`read_trace_csv` reads the trace from a CSV
file with columns ``t_s`` and ``discharge_current_A``.

Method
------
* The power spectral density comes from Welch's method
  (:func:`scipy.signal.welch`, Hann window, 50 % overlap, mean detrending).
  The dominant frequency is the largest peak above the lowest resolvable bin,
  refined by fitting a parabola to the logarithm of the three bins around it
  (a Gaussian-peak interpolation; exact for a Gaussian-shaped peak).
* Uncertainties use non-overlapping batches (batch means): the trace is cut
  into ``n_batches`` equal pieces; the spread of the per-batch mean, rms and
  peak frequency divided by ``sqrt(n_batches)`` estimates the uncertainty of
  the whole-trace value, which accounts for correlation between samples as long
  as a batch is much longer than the correlation time. The frequency
  uncertainty is never quoted below the resolution limit
  ``resolution / sqrt(12)`` of one Welch bin.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import signal

from .exceptions import InputDataError

__all__ = ["TraceSummary", "read_trace_csv", "summarize_trace"]

#: Column names of a trace file.
TIME_COLUMN = "t_s"
CURRENT_COLUMN = "discharge_current_A"
#: Largest relative deviation of a sample interval from the median interval.
_MAX_INTERVAL_JITTER = 1e-3
#: Fewest samples accepted in a trace.
_MIN_SAMPLES = 64


@dataclass(frozen=True)
class TraceSummary:
    """Mean, oscillation amplitude and dominant frequency of a current trace.

    Attributes
    ----------
    mean_A, mean_sigma_A : float
        Time-averaged discharge current and its 1-sigma uncertainty [A].
    rms_amplitude_A, rms_amplitude_sigma_A : float
        Root-mean-square deviation from the mean and its 1-sigma uncertainty [A].
    frequency_Hz, frequency_sigma_Hz : float
        Dominant oscillation frequency and its 1-sigma uncertainty [Hz].
    resolution_Hz : float
        Frequency resolution of the Welch spectrum (sample rate / segment length) [Hz].
    sample_rate_Hz : float
        Sample rate of the trace [Hz].
    duration_s : float
        Length of the trace [s].
    n_samples : int
        Number of samples.
    """

    mean_A: float
    mean_sigma_A: float
    rms_amplitude_A: float
    rms_amplitude_sigma_A: float
    frequency_Hz: float
    frequency_sigma_Hz: float
    resolution_Hz: float
    sample_rate_Hz: float
    duration_s: float
    n_samples: int

    def as_scalars(self) -> list[dict[str, float | str]]:
        """Rows for a scalars table (``name``, ``value``, ``sigma``, ``unit``).

        Returns
        -------
        list of dict
            ``discharge_current`` [A], ``discharge_current_rms_amplitude`` [A]
            and ``discharge_current_frequency`` [Hz].
        """
        return [
            {"name": "discharge_current", "value": self.mean_A, "sigma": self.mean_sigma_A,
             "unit": "A"},
            {"name": "discharge_current_rms_amplitude", "value": self.rms_amplitude_A,
             "sigma": self.rms_amplitude_sigma_A, "unit": "A"},
            {"name": "discharge_current_frequency", "value": self.frequency_Hz,
             "sigma": self.frequency_sigma_Hz, "unit": "Hz"},
        ]

    def to_dict(self) -> dict[str, float | int]:
        """Plain-Python dictionary of every field."""
        return asdict(self)


def _check_trace(t_s: np.ndarray, current_A: np.ndarray, source: str) -> float:
    """Check a trace and return its sample rate [Hz]."""
    if t_s.ndim != 1 or current_A.ndim != 1 or t_s.shape != current_A.shape:
        raise InputDataError(
            f"{source}: time and current must be 1-D arrays of the same length; got shapes "
            f"{t_s.shape} and {current_A.shape}. Fix: give one current sample per time.")
    if t_s.size < _MIN_SAMPLES:
        raise InputDataError(
            f"{source}: a trace needs at least {_MIN_SAMPLES} samples; got {t_s.size}. "
            "Fix: record a longer trace.")
    for name, values in ((TIME_COLUMN, t_s), (CURRENT_COLUMN, current_A)):
        bad = np.flatnonzero(~np.isfinite(values))
        if bad.size:
            raise InputDataError(
                f"{source}: column {name} has {bad.size} non-finite value(s), first at row "
                f"{bad[0] + 1} ({float(values[bad[0]])}). Fix: remove or repair those rows.")
    dt = np.diff(t_s)
    bad = np.flatnonzero(dt <= 0.0)
    if bad.size:
        raise InputDataError(
            f"{source}: column {TIME_COLUMN} must increase strictly; row {bad[0] + 2} "
            f"({float(t_s[bad[0] + 1]):.9g} s) does not follow row {bad[0] + 1} "
            f"({float(t_s[bad[0]]):.9g} s). "
            "Fix: sort the trace by time and drop repeated samples.")
    step = float(np.median(dt))
    jitter = np.abs(dt / step - 1.0)
    worst = int(np.argmax(jitter))
    if jitter[worst] > _MAX_INTERVAL_JITTER:
        raise InputDataError(
            f"{source}: samples must be evenly spaced (within {_MAX_INTERVAL_JITTER:g} of the "
            f"median interval {step:.6g} s); the interval after row {worst + 1} is "
            f"{dt[worst]:.6g} s. Fix: resample the trace onto a uniform time grid first.")
    return 1.0 / step


def _peak_frequency(x: np.ndarray, fs: float, nperseg: int) -> tuple[float, float]:
    """Dominant frequency of ``x`` [Hz] and the Welch resolution [Hz]."""
    f, pxx = signal.welch(x, fs=fs, window="hann", nperseg=nperseg, noverlap=nperseg // 2,
                          detrend="constant", scaling="density")
    resolution = fs / nperseg
    # Skip the DC bin and the first bin, which the window leaks the mean into.
    k0 = 2
    if pxx.size <= k0 + 2 or not np.any(pxx[k0:] > 0):
        return float("nan"), resolution
    k = k0 + int(np.argmax(pxx[k0:-1]))
    if pxx[k] <= 0:
        return float("nan"), resolution
    lo, mid, hi = (math.log(max(p, 1e-300)) for p in pxx[k - 1:k + 2])
    denom = lo - 2.0 * mid + hi
    shift = 0.5 * (lo - hi) / denom if denom < 0 else 0.0
    shift = min(max(shift, -0.5), 0.5)
    return float(f[k] + shift * resolution), resolution


def summarize_trace(t_s: np.ndarray, current_A: np.ndarray, *,
                    frequency_resolution_Hz: float | None = None,
                    n_batches: int = 8, source: str = "discharge-current trace") -> TraceSummary:
    """Mean, rms amplitude and dominant frequency of a discharge-current trace.

    Parameters
    ----------
    t_s : array of shape (n_samples,)
        Sample times [s], strictly increasing and evenly spaced.
    current_A : array of shape (n_samples,)
        Discharge current [A].
    frequency_resolution_Hz : float, optional
        Required resolution of the spectrum [Hz]. Welch segments are made long
        enough for it; a trace too short to give it at least ``n_batches``
        independent segments is refused. By default the segment length is the
        trace length divided by ``n_batches``.
    n_batches : int, default=8
        Number of non-overlapping batches for the uncertainties (at least 4).
    source : str, optional
        Name of the trace in error messages (the file name, say).

    Returns
    -------
    TraceSummary

    Raises
    ------
    InputDataError
        For a trace that is too short, unevenly sampled, not increasing in time
        or too short for the requested resolution; the message names the row
        or value and the fix.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(20000) * 1e-6
    >>> i = 5.0 + 0.8 * np.sin(2 * np.pi * 15e3 * t)
    >>> s = summarize_trace(t, i)
    >>> round(s.mean_A, 3), round(s.rms_amplitude_A, 3), round(s.frequency_Hz / 1e3)
    (5.0, 0.566, 15)
    """
    t = np.asarray(t_s, dtype=float)
    current = np.asarray(current_A, dtype=float)
    n_batches = int(n_batches)
    if n_batches < 4:
        raise InputDataError(f"n_batches must be at least 4; got {n_batches}. Fix: use 4 or more.")
    fs = _check_trace(t, current, source)
    n = t.size
    duration = n / fs
    batch_len = n // n_batches
    if frequency_resolution_Hz is None:
        nperseg = batch_len
    else:
        if not (math.isfinite(frequency_resolution_Hz) and frequency_resolution_Hz > 0):
            raise InputDataError(
                f"frequency_resolution_Hz must be a positive number; got "
                f"{frequency_resolution_Hz!r}. Fix: give the resolution in Hz, e.g. 500.")
        nperseg = math.ceil(fs / frequency_resolution_Hz)
        if nperseg > batch_len:
            needed = nperseg * n_batches / fs
            raise InputDataError(
                f"{source}: the trace lasts {duration:.6g} s, too short for a frequency "
                f"resolution of {frequency_resolution_Hz:g} Hz with {n_batches} batches "
                f"(needs at least {needed:.6g} s). Fix: record a longer trace, ask for a "
                f"coarser resolution (>= {n_batches * fs / n:.6g} Hz) or use fewer batches.")
    if nperseg < 16:
        raise InputDataError(
            f"{source}: {n} samples give only {nperseg} samples per Welch segment with "
            f"{n_batches} batches (need 16). Fix: record a longer trace.")

    mean = float(np.mean(current))
    rms = float(np.std(current))
    freq, resolution = _peak_frequency(current, fs, nperseg)

    usable = batch_len * n_batches
    batches = current[:usable].reshape(n_batches, batch_len)
    root = math.sqrt(n_batches)
    mean_sigma = float(np.std(batches.mean(axis=1), ddof=1)) / root
    rms_sigma = float(np.std(batches.std(axis=1), ddof=1)) / root
    batch_freqs = np.array([_peak_frequency(b, fs, min(nperseg, b.size))[0] for b in batches])
    floor = resolution / math.sqrt(12.0)
    finite = batch_freqs[np.isfinite(batch_freqs)]
    spread = float(np.std(finite, ddof=1)) / root if finite.size >= 2 else float("inf")
    freq_sigma = max(floor, spread)
    if not math.isfinite(freq):
        raise InputDataError(
            f"{source}: the current has no oscillation to measure (its spectrum is zero above "
            "the lowest bins). Fix: leave the oscillation observables out of the data set.")
    return TraceSummary(
        mean_A=mean, mean_sigma_A=mean_sigma, rms_amplitude_A=rms, rms_amplitude_sigma_A=rms_sigma,
        frequency_Hz=freq, frequency_sigma_Hz=freq_sigma, resolution_Hz=resolution,
        sample_rate_Hz=fs, duration_s=duration, n_samples=n)


def read_trace_csv(path: str | Path) -> tuple[np.ndarray, np.ndarray]:
    """Read a discharge-current trace from a CSV file.

    Parameters
    ----------
    path : str or Path
        CSV file with columns ``t_s`` [s] and ``discharge_current_A`` [A].

    Returns
    -------
    t_s, current_A : ndarray of shape (n_samples,)

    Raises
    ------
    InputDataError
        For a missing file or column, or a value that is not a number (the
        message names the file, the 1-based data row and the column).
    """
    path = Path(path)
    if not path.is_file():
        raise InputDataError(f"trace file {path} does not exist. Fix: check the path.")
    try:
        frame = pd.read_csv(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputDataError(f"{path}: not a readable CSV file ({exc}).") from None
    missing = [c for c in (TIME_COLUMN, CURRENT_COLUMN) if c not in frame.columns]
    if missing:
        raise InputDataError(
            f"{path}: missing column(s) {', '.join(missing)}; found {', '.join(map(str, frame.columns))}. "
            f"Fix: name the columns {TIME_COLUMN} (seconds) and {CURRENT_COLUMN} (amperes).")
    out = []
    for column in (TIME_COLUMN, CURRENT_COLUMN):
        values = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(np.isnan(values) & frame[column].notna().to_numpy())
        if bad.size == 0:
            bad = np.flatnonzero(np.isnan(values))
        if bad.size:
            raise InputDataError(
                f"{path}: row {bad[0] + 1}, column {column}: {frame[column].iloc[bad[0]]!r} is not "
                "a number. Fix: repair or remove that row.")
        out.append(values)
    return out[0], out[1]
