#!/usr/bin/env python3
"""Reference calibration written the way a lab typically would with numpy and scipy.

It is the yardstick of the benchmark, not a second implementation of trapwise: a Welch spectrum
(scipy.signal.welch, Hann window, 50 % overlap) fitted by scipy.optimize.curve_fit with the plain
Lorentzian S(f) = D / (pi^2 (fc^2 + f^2)) (one-sided form; Berg-Sorensen & Flyvbjerg, Rev. Sci.
Instrum. 75, 594 (2004), give the two-sided D / (2 pi^2 (fc^2 + f^2))), ignoring aliasing; an FFT
autocorrelation fitted by an exponential A exp(-t / tau); and the variance (equipartition,
kappa = kB T / <x^2>). Stiffness from the spectrum is kappa = 2 pi gamma fc and from the
autocorrelation kappa = gamma / tau, with gamma = 6 pi eta R (Stokes drag).

Modes:
  reference.py calibrate FILE --truth TRUTH.json [--repeat K]
      calibrate every axis of a file written by `trapwise simulate` (csv, npy or raw f32),
      print one JSON object with the per-stage times (medians over K runs in this process)
      and the error of each method against the truth.
  reference.py efficiency --fc HZ --fs HZ --n N --seeds S
      simulate S exact AR(1) records (numpy) and print the spread, bias and one-standard-error
      interval coverage of the reference's fc and kappa.

Timing note: on this machine OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE may be set for old OpenBLAS
builds; bench/run.sh unsets both for the command that runs this script only.
"""

import argparse
import json
import math
import sys
import time

import numpy as np
import scipy
from scipy.optimize import curve_fit
from scipy.signal import lfilter, welch

BOLTZMANN_J_PER_K = 1.380649e-23  # exact in the 2019 SI
FIT_MIN_HZ = 10.0
FIT_MAX_FRACTION_OF_FS = 0.4  # 20 kHz at 50 kHz, the band trapwise fits by default


def load(path, n_axes):
    """Positions in nm, one row per axis; the formats `trapwise simulate` writes."""
    if path.endswith(".csv"):
        data = np.loadtxt(path, delimiter=",", skiprows=1)
        return data[:, 1:].T  # first column is time
    if path.endswith(".npy"):
        data = np.load(path)
        return data.T if data.ndim == 2 else data[None, :]
    if path.endswith(".f32"):
        data = np.fromfile(path, dtype="<f4").astype(np.float64)
        return data.reshape(-1, n_axes).T
    raise SystemExit(f"{path}: unknown extension")


def lorentzian(f, fc, d):
    return d / (math.pi**2 * (fc**2 + f**2))


def fit_psd(x, fs):
    """Welch spectrum and a plain-Lorentzian least-squares fit with relative weights."""
    nperseg = min(len(x), 8192)
    f, p = welch(x, fs=fs, nperseg=nperseg)
    band = (f >= FIT_MIN_HZ) & (f <= FIT_MAX_FRACTION_OF_FS * fs)
    fb, pb = f[band], p[band]
    # Starting values from the plateau and the half-power point (common practice).
    p0_level = pb[: max(3, len(pb) // 50)].mean()
    fc0 = fb[np.argmin(np.abs(pb - p0_level / 2))]
    d0 = p0_level * math.pi**2 * fc0**2
    popt, pcov = curve_fit(lorentzian, fb, pb, p0=(fc0, d0), sigma=pb, absolute_sigma=False)
    return popt[0], math.sqrt(pcov[0, 0]), popt[1]


def fit_acf(x, fs):
    """FFT autocorrelation (zero-padded, biased) and an exponential fit out to where it falls
    below 1/e^2 (common practice)."""
    n = len(x)
    y = x - x.mean()
    nfft = 1 << (2 * n - 1).bit_length()
    spec = np.fft.rfft(y, nfft)
    acf = np.fft.irfft(spec * np.conj(spec), nfft)[:n] / n
    acf = acf / acf[0]
    below = np.nonzero(acf < math.exp(-2))[0]
    last = int(below[0]) if len(below) else min(n, 1000)
    last = max(last, 4)
    lags = np.arange(last) / fs
    popt, pcov = curve_fit(
        lambda t, a, tau: a * np.exp(-t / tau), lags, acf[:last], p0=(1.0, lags[last // 2] or 1 / fs)
    )
    return popt[1], math.sqrt(pcov[1, 1])


def calibrate_axis(x, fs, gamma_pn_s_per_nm, kt_pn_nm):
    t0 = time.perf_counter()
    fc, fc_se, _d = fit_psd(x, fs)
    t1 = time.perf_counter()
    tau, tau_se = fit_acf(x, fs)
    t2 = time.perf_counter()
    var = float(np.var(x))
    t3 = time.perf_counter()
    return {
        "fc_hz": fc,
        "fc_se_hz": fc_se,
        "kappa_psd": 2 * math.pi * gamma_pn_s_per_nm * fc,
        "kappa_psd_se": 2 * math.pi * gamma_pn_s_per_nm * fc_se,
        "kappa_acf": gamma_pn_s_per_nm / tau,
        "kappa_acf_se": gamma_pn_s_per_nm * tau_se / tau**2,
        "kappa_eq": kt_pn_nm / var,
        "times_s": {"psd": t1 - t0, "acf": t2 - t1, "variance": t3 - t2},
    }


def drag_pn_s_per_nm(viscosity_mpa_s, diameter_um):
    """Stokes drag 6 pi eta R, in pN s/nm."""
    eta_pa_s = viscosity_mpa_s * 1e-3
    radius_m = diameter_um * 0.5e-6
    return 6 * math.pi * eta_pa_s * radius_m * 1e3  # N s/m -> pN s/nm


def cmd_calibrate(args):
    with open(args.truth) as fh:
        truth = json.load(fh)
    fs = truth["sample_rate_hz"]
    axes_truth = truth["axes"]
    gamma = drag_pn_s_per_nm(truth["viscosity_mpa_s"], truth["bead_diameter_um"])
    kt = BOLTZMANN_J_PER_K * (truth["temperature_c"] + 273.15) * 1e21  # J -> pN nm
    load_times, total_times, results = [], [], None
    for _ in range(args.repeat):
        start = time.perf_counter()
        data = load(args.file, len(axes_truth))
        loaded = time.perf_counter()
        results = [calibrate_axis(row, fs, gamma, kt) for row in data]
        done = time.perf_counter()
        load_times.append(loaded - start)
        total_times.append(done - start)
    out_axes = []
    for res, tr in zip(results, axes_truth):
        k_true = tr["stiffness_pn_per_nm"]
        fc_true = tr["corner_frequency_hz"]
        out_axes.append(
            {
                "axis": tr["axis"],
                "fc_hz": res["fc_hz"],
                "fc_rel_error": res["fc_hz"] / fc_true - 1,
                "kappa_psd_rel_error": res["kappa_psd"] / k_true - 1,
                "kappa_acf_rel_error": res["kappa_acf"] / k_true - 1,
                "kappa_eq_rel_error": res["kappa_eq"] / k_true - 1,
                "stage_times_s": res["times_s"],
            }
        )
    print(
        json.dumps(
            {
                "file": args.file,
                "numpy": np.__version__,
                "scipy": scipy.__version__,
                "repeat": args.repeat,
                "load_median_s": float(np.median(load_times)),
                "total_median_s": float(np.median(total_times)),
                "axes": out_axes,
            }
        )
    )


def ar1(fc, fs, n, variance, rng):
    """Exact AR(1) sampling of the Ornstein-Uhlenbeck process: x_{j+1} = c x_j + sigma
    sqrt(1 - c^2) xi_j with c = exp(-2 pi fc / fs), stationary start (Norrelykke & Flyvbjerg,
    Phys. Rev. E 83, 041103 (2011), overdamped limit)."""
    c = math.exp(-2 * math.pi * fc / fs)
    sigma = math.sqrt(variance)
    kicks = sigma * math.sqrt(1 - c * c) * rng.standard_normal(n)
    kicks[0] = sigma * rng.standard_normal()
    return lfilter([1.0], [1.0, -c], kicks)


def cmd_efficiency(args):
    gamma = drag_pn_s_per_nm(0.8900226791329175, 1.0)  # water at 25 C, IAPWS 2008
    kt = BOLTZMANN_J_PER_K * 298.15 * 1e21
    kappa_true = 2 * math.pi * gamma * args.fc
    variance = kt / kappa_true
    rng = np.random.default_rng(args.base_seed)
    fcs, fc_ses, kaps, kap_ses = [], [], [], []
    failures = 0
    for _ in range(args.seeds):
        x = ar1(args.fc, args.fs, args.n, variance, rng)
        try:
            res = calibrate_axis(x, args.fs, gamma, kt)
        except (RuntimeError, ValueError):
            failures += 1
            continue
        fcs.append(res["fc_hz"])
        fc_ses.append(res["fc_se_hz"])
        kaps.append(res["kappa_psd"])
        kap_ses.append(res["kappa_psd_se"])
    fcs, fc_ses = np.array(fcs), np.array(fc_ses)
    sd = float(fcs.std(ddof=1))
    print(
        json.dumps(
            {
                "method": "reference (welch + plain Lorentzian curve_fit)",
                "fc_true_hz": args.fc,
                "fs_hz": args.fs,
                "n_samples": args.n,
                "seeds": len(fcs),
                "failures": failures,
                "fc_mean_hz": float(fcs.mean()),
                "fc_sd_hz": sd,
                # IQR / 1.349, the sd of a Gaussian with the same interquartile range.
                "fc_sd_robust_hz": float(np.subtract(*np.percentile(fcs, [75, 25])) / 1.349),
                "fc_bias_rel": float(fcs.mean() / args.fc - 1),
                "fc_bias_in_sd": float((fcs.mean() - args.fc) / sd),
                "fc_coverage_1se": float(np.mean(np.abs(fcs - args.fc) <= fc_ses)),
                "numpy": np.__version__,
                "scipy": scipy.__version__,
            }
        )
    )


def main():
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = parser.add_subparsers(dest="cmd", required=True)
    c = sub.add_parser("calibrate")
    c.add_argument("file")
    c.add_argument("--truth", required=True)
    c.add_argument("--repeat", type=int, default=1)
    e = sub.add_parser("efficiency")
    e.add_argument("--fc", type=float, required=True)
    e.add_argument("--fs", type=float, default=50_000.0)
    e.add_argument("--n", type=int, required=True)
    e.add_argument("--seeds", type=int, default=300)
    e.add_argument("--base-seed", type=int, default=20240611)
    args = parser.parse_args()
    if args.cmd == "calibrate":
        cmd_calibrate(args)
    else:
        cmd_efficiency(args)


if __name__ == "__main__":
    sys.exit(main())
