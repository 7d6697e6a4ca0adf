"""Reference autocovariances of a trapped bead with frequency-dependent (hydrodynamic) drag.

The autocovariance is the cosine transform of the one-sided spectrum,

    C(t) = integral_0^inf S(f) cos(2 pi f t) df,

with the hydrodynamic spectrum (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004),
written one-sided; D / pi^2 instead of D / (2 pi^2)):

    S(f) = (D / pi^2) (1 + s) / ((fc - f s - f^2 / f_m)^2 + (f + f s)^2),   s = sqrt(f / f_nu),

optionally times the photodiode filter g(f) = alpha^2 + (1 - alpha^2) / (1 + (f / f3)^2)
(Berg-Sorensen, Oddershede, Florin & Flyvbjerg, J. Appl. Phys. 93, 3167 (2003)) and, for a
camera exposure W (box-car average), times sinc^2(pi f W) = (sin(pi f W) / (pi f W))^2.

Every value is computed here with scipy.integrate.quad: weight='cos' (QUADPACK's QAWF Fourier
integral over [0, inf)) for t > 0, and plain adaptive quadrature in ln f for t = 0. The whole
spectrum is integrated (no part in closed form), so the values are independent of the Rust
code's split into a closed-form Lorentzian and a numerical remainder. As a check the script
computes each value a second way and prints the largest disagreement (the Rust test's tolerance
is set above it): without blur as the closed-form Lorentzian (filtered) transform plus
quad(weight='cos') of the difference; with blur (lags 0 to 3) as the triangle-weighted time
average of the unblurred autocovariance over t +- W, the covariance of box-car averages.

The parameters are those of shared/PHYSICS.md section 4 (polystyrene, 1050 kg/m^3, in water at
25 C, viscosity 0.8900 mPa s from IAPWS 2008 with the Tanaka density 997.047 kg/m^3):
f_nu = nu / (pi R^2), f_m = gamma0 / (2 pi m*), m* = m_bead + m_fluid / 2. D is chosen so that
sigma^2 = D / (2 pi fc) = 1.

Written with Python 3.11, numpy 2.4.6 and scipy 1.17.1. Run from this directory:
    python3 make_hydro_acf_fixture.py
Output: hydro_acf.csv with columns
    set,f_nu_hz,f_m_hz,fc_hz,diffusion,f3db_hz,alpha,exposure_s,sample_rate_hz,lag,acov
(f3db_hz = 0 means no filter, exposure_s = 0 means instantaneous samples).
"""

import math

import numpy as np
from scipy.integrate import quad

ETA = 0.8900e-3  # Pa s
RHO_WATER = 997.047  # kg / m^3
RHO_BEAD = 1050.0  # kg / m^3


def hydro_frequencies(diameter_m):
    radius = diameter_m / 2
    f_nu = ETA / RHO_WATER / (math.pi * radius**2)
    volume = 4.0 / 3.0 * math.pi * radius**3
    mass = volume * (RHO_BEAD + RHO_WATER / 2)
    f_m = 6 * math.pi * ETA * radius / (2 * math.pi * mass)
    return f_nu, f_m


def spectrum(f, p):
    s = math.sqrt(f / p["f_nu"])
    re = p["fc"] - f * s - f * f / p["f_m"]
    im = f + f * s
    value = p["d"] / math.pi**2 * (1 + s) / (re * re + im * im)
    return value * gain(f, p) * blur(f, p)


def lorentzian(f, p):
    return p["d"] / (math.pi**2 * (p["fc"] ** 2 + f * f)) * gain(f, p) * blur(f, p)


def gain(f, p):
    if p["f3"] == 0:
        return 1.0
    a2 = p["alpha"] ** 2
    return a2 + (1 - a2) / (1 + (f / p["f3"]) ** 2)


def blur(f, p):
    if p["w"] == 0:
        return 1.0
    x = math.pi * f * p["w"]
    return 1.0 if x == 0 else (math.sin(x) / x) ** 2


def transform(function, t, p):
    """integral_0^inf function(f) cos(2 pi f t) df by QUADPACK."""
    if t == 0:
        # In y = ln f, so that the scales from fc to f_m (and 1/W) are all resolved; beyond
        # f = e^60 the integrand (at most ~ f^-2) adds below 1e-25.
        def in_log(y):
            f = math.exp(y)
            return function(f) * f

        cuts = [-30.0, math.log(p["fc"]), 20.0, 40.0, 60.0]
        return sum(
            quad(in_log, lo, hi, epsabs=1e-16, epsrel=1e-14, limit=2000)[0]
            for lo, hi in zip(cuts, cuts[1:])
        )
    return quad(
        function, 0.0, np.inf, weight="cos", wvar=2 * math.pi * t,
        epsabs=1e-15, limlst=500, limit=1000,
    )[0]


def blurred_in_time(t, p):
    """The blurred value a second way: the triangle-weighted average over t +- W of the unblurred
    C (itself from quad(weight='cos')), (1/W) integral_{-W}^{W} (1 - |u|/W) C(|t + u|) du."""
    unblurred = dict(p, w=0.0)

    def c_at(s):
        return transform(lambda f: spectrum(f, unblurred), abs(s), unblurred)

    w = p["w"]
    kernel = lambda u: (1 - abs(u) / w) / w * c_at(t + u)
    return sum(
        quad(kernel, lo, hi, epsabs=1e-14, epsrel=1e-12, limit=200)[0]
        for lo, hi in [(-w, 0.0), (0.0, w)]
    )


def closed_lorentzian(t, p):
    """Closed-form transform of the (filtered) Lorentzian, unblurred only."""
    var = p["d"] / (2 * math.pi * p["fc"])
    e_c = math.exp(-2 * math.pi * p["fc"] * t)
    if p["f3"] == 0:
        return var * e_c
    a2, fc, f3 = p["alpha"] ** 2, p["fc"], p["f3"]
    kappa = f3**2 / (f3**2 - fc**2)
    e_3 = math.exp(-2 * math.pi * f3 * t)
    return var * (a2 * e_c + (1 - a2) * kappa * (e_c - fc / f3 * e_3))


def main():
    f_nu3, f_m3 = hydro_frequencies(3e-6)
    f_nu1, f_m1 = hydro_frequencies(1e-6)
    long_lags = list(range(0, 41)) + [50, 64, 100, 200, 400, 1000]
    sets = [
        # 3 um bead, photodiode without filter, fs = 100 kHz.
        dict(f_nu=f_nu3, f_m=f_m3, fc=1000.0, f3=0.0, alpha=1.0, w=0.0, fs=1e5, lags=long_lags),
        # 1 um bead, filtered photodiode (f3 = 6 kHz, alpha = 0.15), fs = 100 kHz.
        dict(f_nu=f_nu1, f_m=f_m1, fc=2000.0, f3=6000.0, alpha=0.15, w=0.0, fs=1e5, lags=long_lags),
        # 3 um bead seen by a camera at 4 kHz with exposure W = dt.
        dict(f_nu=f_nu3, f_m=f_m3, fc=300.0, f3=0.0, alpha=1.0, w=1 / 4000.0, fs=4000.0,
             lags=list(range(0, 21)) + [40, 100]),
    ]
    worst = 0.0
    with open("hydro_acf.csv", "w", encoding="ascii") as out:
        out.write("set,f_nu_hz,f_m_hz,fc_hz,diffusion,f3db_hz,alpha,exposure_s,sample_rate_hz,lag,acov\n")
        for index, p in enumerate(sets):
            p["d"] = 2 * math.pi * p["fc"]
            for lag in p["lags"]:
                t = lag / p["fs"]
                value = transform(lambda f: spectrum(f, p), t, p)
                if p["w"] == 0:
                    split = closed_lorentzian(t, p) + transform(
                        lambda f: spectrum(f, p) - lorentzian(f, p), t, p
                    )
                    worst = max(worst, abs(split - value))
                elif lag <= 3:
                    worst = max(worst, abs(blurred_in_time(t, p) - value))
                out.write(
                    f"{index},{p['f_nu']!r},{p['f_m']!r},{p['fc']!r},{p['d']!r},{p['f3']!r},"
                    f"{p['alpha']!r},{p['w']!r},{p['fs']!r},{lag},{value!r}\n"
                )
    print(f"largest disagreement of the two quad evaluations (sigma^2 = 1): {worst:.3e}")


if __name__ == "__main__":
    main()
