"""Fixture for the spectrum module: a deterministic test signal, its periodogram and a Welch average.

Conventions (scipy.signal, scaling='density', return_onesided=True):
  * With X_k = sum_j x_j exp(-2 pi i j k / N), sample interval dt = 1/fs, the two-sided density is
    P_k = dt |X_k|^2 / N at f_k = k fs / N.
  * scipy's one-sided density doubles every bin except DC (k = 0) and, for even N, the Nyquist
    bin (k = N/2): S_k = 2 dt |X_k|^2 / N for 0 < k < N/2, and dt |X_k|^2 / N at k = 0 and N/2.
    There are N/2 + 1 bins, f = 0 ... fs/2. With this doubling, sum_k S_k * fs/N = mean(x^2)
    (Parseval), which this script asserts.
  * window='boxcar' and detrend=False: no taper, no mean removal, so the DC bin is |sum x|^2 dt/N.
  * The Welch average splits x into 4 non-overlapping segments of 1024 samples, takes the same
    one-sided boxcar periodogram of each (1024/2 + 1 = 513 bins, spacing fs/1024) and averages
    them with equal weight (scipy's default average='mean').

Signal: numpy.random.default_rng(12345); N = 4096; an AR(1) series x[j+1] = c x[j] + s xi[j] with
c = 0.9, s = sqrt(1 - c^2) (unit stationary variance), xi standard normal, started from
x[0] ~ N(0, 1) (stationary start); plus a sine of amplitude 0.5 at exactly bin 300 of the full
record, 0.5 sin(2 pi 300 j / N), i.e. at 300 fs / N = 732.421875 Hz for fs = 10000 Hz.

Written with Python 3, numpy 2.4.6, scipy 1.17.1. Run from this directory:
    python3 make_periodogram_fixture.py
Outputs (comma-separated, with a header line, floats written with repr(), which round-trips
binary64 exactly):
    signal.csv        one column: x
    periodogram.csv   frequency_hz,psd   (N/2 + 1 = 2049 rows)
    welch_4seg.csv    frequency_hz,psd   (1024/2 + 1 = 513 rows)
"""

import numpy as np
import scipy.signal

SAMPLE_RATE_HZ = 10000.0
N_SAMPLES = 4096
AR_COEFFICIENT = 0.9
SINE_BIN = 300
SINE_AMPLITUDE = 0.5
WELCH_SEGMENT = 1024


def make_signal() -> np.ndarray:
    rng = np.random.default_rng(12345)
    noise_scale = np.sqrt(1.0 - AR_COEFFICIENT**2)
    x = np.empty(N_SAMPLES)
    x[0] = rng.standard_normal()
    xi = rng.standard_normal(N_SAMPLES - 1)
    for j in range(N_SAMPLES - 1):
        x[j + 1] = AR_COEFFICIENT * x[j] + noise_scale * xi[j]
    j = np.arange(N_SAMPLES)
    return x + SINE_AMPLITUDE * np.sin(2.0 * np.pi * SINE_BIN * j / N_SAMPLES)


def direct_one_sided(x: np.ndarray, fs: float) -> np.ndarray:
    """The one-sided boxcar density straight from the FFT, as an independent check of scipy."""
    n = len(x)
    power = np.abs(np.fft.rfft(x)) ** 2 / (fs * n)
    power[1 : (n + 1) // 2] *= 2.0  # all bins but DC and (for even n) Nyquist
    return power


def write_two_columns(path: str, frequency_hz: np.ndarray, psd: np.ndarray) -> None:
    with open(path, "w", encoding="ascii") as out:
        out.write("frequency_hz,psd\n")
        for f, p in zip(frequency_hz, psd):
            out.write(f"{float(f)!r},{float(p)!r}\n")


def main() -> None:
    x = make_signal()
    with open("signal.csv", "w", encoding="ascii") as out:
        out.write("x\n")
        for value in x:
            out.write(f"{float(value)!r}\n")

    frequency_hz, psd = scipy.signal.periodogram(
        x,
        fs=SAMPLE_RATE_HZ,
        window="boxcar",
        detrend=False,
        scaling="density",
        return_onesided=True,
    )
    assert len(psd) == N_SAMPLES // 2 + 1
    np.testing.assert_allclose(psd, direct_one_sided(x, SAMPLE_RATE_HZ), rtol=1e-12, atol=0.0)
    np.testing.assert_allclose(psd.sum() * SAMPLE_RATE_HZ / N_SAMPLES, np.mean(x**2), rtol=1e-12)
    write_two_columns("periodogram.csv", frequency_hz, psd)

    welch_frequency_hz, welch_psd = scipy.signal.welch(
        x,
        fs=SAMPLE_RATE_HZ,
        window="boxcar",
        nperseg=WELCH_SEGMENT,
        noverlap=0,
        detrend=False,
    )
    segments = x.reshape(N_SAMPLES // WELCH_SEGMENT, WELCH_SEGMENT)
    expected_welch = np.mean([direct_one_sided(s, SAMPLE_RATE_HZ) for s in segments], axis=0)
    assert len(welch_psd) == WELCH_SEGMENT // 2 + 1
    np.testing.assert_allclose(welch_psd, expected_welch, rtol=1e-12, atol=0.0)
    write_two_columns("welch_4seg.csv", welch_frequency_hz, welch_psd)


if __name__ == "__main__":
    main()
