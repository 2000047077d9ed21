"""Discharge-current trace summaries (profshape.traces)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal, stats

from profshape.exceptions import InputDataError
from profshape.traces import read_trace_csv, summarize_trace

FS = 1.0e6  # sample rate [Hz]


def _trace(n=40000, f=17.3e3, amp=0.9, mean=4.7, noise=0.05, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / FS
    i = mean + amp * np.sin(2 * np.pi * f * t + 0.3) + noise * rng.standard_normal(n)
    return t, i


def test_sinusoid_recovered():
    t, i = _trace()
    s = summarize_trace(t, i)
    # Closed form: a sine of amplitude a has rms a / sqrt(2); independent noise adds in quadrature.
    assert s.mean_A == pytest.approx(4.7, abs=3 * s.mean_sigma_A + 1e-3)
    assert s.rms_amplitude_A == pytest.approx(np.hypot(0.9 / np.sqrt(2), 0.05), rel=5e-3)
    assert abs(s.frequency_Hz - 17.3e3) < s.resolution_Hz / 2
    assert s.frequency_sigma_Hz >= s.resolution_Hz / np.sqrt(12)
    assert s.sample_rate_Hz == pytest.approx(FS)
    assert s.n_samples == 40000


def test_frequency_agrees_with_scipy_periodogram():
    # Reference implementation: the peak of scipy.signal.periodogram of the whole trace, whose
    # bins are n/nperseg times finer than the Welch bins used here.
    t, i = _trace(n=80000, f=23.1e3, noise=0.2, seed=3)
    s = summarize_trace(t, i)
    f, p = signal.periodogram(i - i.mean(), fs=FS)
    assert abs(s.frequency_Hz - f[np.argmax(p)]) < s.resolution_Hz / 2


def test_mean_uncertainty_honest_for_correlated_noise():
    # AR(1) noise x_k = phi x_{k-1} + e_k: the variance of the mean of n samples tends to
    # sigma_x^2 (1 + phi) / ((1 - phi) n) (Box and Jenkins, Time Series Analysis, ch. 2),
    # about 19 times the naive sigma_x^2 / n for phi = 0.9. Batch means must see it.
    phi, n, reps = 0.9, 16384, 60
    rng = np.random.default_rng(11)
    z = []
    quoted = []
    for _ in range(reps):
        e = rng.standard_normal(n)
        x = signal.lfilter([1.0], [1.0, -phi], e)
        t = np.arange(n) / FS
        s = summarize_trace(t, 3.0 + 0.01 * x)
        z.append((s.mean_A - 3.0) / s.mean_sigma_A)
        quoted.append(s.mean_sigma_A)
    sigma_x = 0.01 / np.sqrt(1 - phi**2)
    exact = sigma_x * np.sqrt((1 + phi) / ((1 - phi) * n))
    assert np.median(quoted) == pytest.approx(exact, rel=0.3)
    # The z-scores have unit spread: a chi-square test of their variance at the 0.1 % level
    # (scipy.stats.chi2). Batch-means z-scores are t-like with n_batches - 1 dof, so allow
    # the variance of a t(7) distribution, 7/5.
    var = float(np.var(z, ddof=1))
    lo = stats.chi2.ppf(0.0005, reps - 1) / (reps - 1)
    hi = stats.chi2.ppf(0.9995, reps - 1) / (reps - 1) * 7 / 5
    assert lo < var < hi


def test_too_short_for_resolution_refused():
    t, i = _trace(n=4000)
    with pytest.raises(InputDataError, match=r"too short for a frequency resolution of 100 Hz.*Fix"):
        summarize_trace(t, i, frequency_resolution_Hz=100.0)
    s = summarize_trace(t, i, frequency_resolution_Hz=2000.0)
    assert s.resolution_Hz <= 2000.0


@pytest.mark.parametrize(("mutate", "pattern"), [
    (lambda t, i: (t[:10], i[:10]), r"at least 64 samples; got 10"),
    (lambda t, i: (t, np.where(np.arange(t.size) == 5, np.nan, i)), r"row 6 \(nan\)"),
    (lambda t, i: (np.where(np.arange(t.size) == 9, t[8], t), i), r"row 10 .* does not follow row 9"),
    (lambda t, i: (t * np.where(np.arange(t.size) > 100, 1.01, 1.0), i), r"evenly spaced.*row 101"),
    (lambda t, i: (t, i[:-1]), r"same length"),
])
def test_bad_traces_refused(mutate, pattern):
    t, i = _trace(n=2000)
    with pytest.raises(InputDataError, match=pattern):
        summarize_trace(*mutate(t, i))


def test_constant_current_refused():
    t = np.arange(1000) / FS
    with pytest.raises(InputDataError, match="no oscillation"):
        summarize_trace(t, np.full(1000, 5.0))


def test_csv_round_trip_and_errors(tmp_path):
    t, i = _trace(n=3000)
    path = tmp_path / "trace.csv"
    import pandas as pd

    pd.DataFrame({"t_s": t, "discharge_current_A": i}).to_csv(path, index=False)
    t2, i2 = read_trace_csv(path)
    np.testing.assert_allclose(t2, t, rtol=1e-15)
    np.testing.assert_allclose(i2, i, rtol=1e-15)
    rows = summarize_trace(t2, i2).as_scalars()
    assert [r["name"] for r in rows] == ["discharge_current", "discharge_current_rms_amplitude",
                                        "discharge_current_frequency"]
    bad = tmp_path / "bad.csv"
    bad.write_text("t_s,current\n0,1\n")
    with pytest.raises(InputDataError, match=r"missing column.*discharge_current_A"):
        read_trace_csv(bad)
    bad.write_text("t_s,discharge_current_A\n0,1\n1e-6,abc\n")
    with pytest.raises(InputDataError, match="row 2, column discharge_current_A: 'abc'"):
        read_trace_csv(bad)
    with pytest.raises(InputDataError, match="does not exist"):
        read_trace_csv(tmp_path / "nope.csv")
