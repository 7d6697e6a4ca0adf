"""Fixture for the spectrum module: the aliased Lorentzian of instantaneously sampled OU motion.

Two-sided Lorentzian (Berg-Sorensen & Flyvbjerg, Rev. Sci. Instrum. 75, 594 (2004)):
    P(f) = D / (2 pi^2 (fc^2 + f^2)),   integral over all f = D / (2 pi fc).
Sampling at fs folds it into the aliased density P_al(f) = sum_{n in Z} P(f + n fs).

This script computes P_al in two independent ways and writes the direct sum:
  1. direct alias sum over n = -200000 .. 200000, added with math.fsum (exactly rounded sum of
     the binary64 terms), plus the two tails |n| > 200000 in closed form by the midpoint rule,
         sum_{n > M} P(f + n fs) ~ integral from M + 1/2 to infinity
             = D / (2 pi^2 fs fc) * arctan(fc / (f + (M + 1/2) fs)),
     and likewise for n < -M with f - (M + 1/2) fs; the midpoint error is of relative order
     1/M^2 of the tail, far below double precision here;
  2. the closed form of the same sum (Berg-Sorensen & Flyvbjerg 2004), with c = exp(-2 pi fc/fs)
     and sigma^2 = D / (2 pi fc):
         P_al(f) = sigma^2 (1 - c^2) / (fs (1 + c^2 - 2 c cos(2 pi f / fs))),
     evaluated as sigma^2 (-expm1(-4 pi fc / fs)) / (fs ((1 - c)^2 + 4 c sin^2(pi f / fs))) to
     avoid cancellation.
The script asserts that the two agree to 1e-12 relative at every point.

Written with Python 3, numpy 2.4.6 (scipy 1.17.1 installed but not needed).
Run from this directory:  python3 make_aliased_fixture.py
Output: aliased_lorentzian.csv with a header line and columns
    corner_frequency_hz, sample_rate_hz, frequency_hz, diffusion, psd_two_sided_direct_sum
(diffusion in length^2/s, psd in length^2/Hz, both in the same arbitrary length unit; floats
written with repr(), which round-trips binary64 exactly).
"""

import math

import numpy as np

N_ALIAS = 200000

# (corner_frequency_hz, sample_rate_hz, diffusion): low, middle and high corner relative to fs,
# with D = 1 and with the D of a 1 um bead in water at 25 °C in m^2/s (k_B T / 6 pi eta R).
CASES = [
    (100.0, 10000.0, 1.0),
    (1000.0, 10000.0, 1.0),
    (4000.0, 10000.0, 1.0),
    (500.0, 50000.0, 4.9e-13),
    (2000.0, 100000.0, 4.9e-13),
]


def frequencies_for(sample_rate_hz: float, corner_frequency_hz: float) -> list[float]:
    nyquist_hz = sample_rate_hz / 2.0
    return [0.0, 10.0, corner_frequency_hz, sample_rate_hz / 4.0, 0.9 * nyquist_hz, nyquist_hz]


def lorentzian_two_sided(f, corner_frequency_hz, diffusion):
    return diffusion / (2.0 * math.pi**2 * (corner_frequency_hz**2 + f**2))


def direct_sum(corner_frequency_hz, sample_rate_hz, frequency_hz, diffusion) -> float:
    n = np.arange(-N_ALIAS, N_ALIAS + 1, dtype=np.float64)
    terms = lorentzian_two_sided(frequency_hz + n * sample_rate_hz, corner_frequency_hz, diffusion)
    edge = (N_ALIAS + 0.5) * sample_rate_hz
    tail_scale = diffusion / (2.0 * math.pi**2 * sample_rate_hz * corner_frequency_hz)
    upper_tail = tail_scale * math.atan(corner_frequency_hz / (frequency_hz + edge))
    lower_tail = tail_scale * math.atan(corner_frequency_hz / (edge - frequency_hz))
    return math.fsum(list(terms) + [upper_tail, lower_tail])


def closed_form(corner_frequency_hz, sample_rate_hz, frequency_hz, diffusion) -> float:
    x = corner_frequency_hz / sample_rate_hz
    c = math.exp(-2.0 * math.pi * x)
    variance = diffusion / (2.0 * math.pi * corner_frequency_hz)
    one_minus_c = -math.expm1(-2.0 * math.pi * x)
    one_minus_c2 = -math.expm1(-4.0 * math.pi * x)
    half_angle = math.pi * frequency_hz / sample_rate_hz
    denominator = one_minus_c**2 + 4.0 * c * math.sin(half_angle) ** 2
    return variance * one_minus_c2 / (sample_rate_hz * denominator)


def main() -> None:
    worst = 0.0
    with open("aliased_lorentzian.csv", "w", encoding="ascii") as out:
        out.write(
            "corner_frequency_hz,sample_rate_hz,frequency_hz,diffusion,psd_two_sided_direct_sum\n"
        )
        for corner_frequency_hz, sample_rate_hz, diffusion in CASES:
            for frequency_hz in frequencies_for(sample_rate_hz, corner_frequency_hz):
                direct = direct_sum(corner_frequency_hz, sample_rate_hz, frequency_hz, diffusion)
                closed = closed_form(corner_frequency_hz, sample_rate_hz, frequency_hz, diffusion)
                relative = abs(direct - closed) / closed
                worst = max(worst, relative)
                assert relative < 1e-12, (corner_frequency_hz, sample_rate_hz, frequency_hz, relative)
                out.write(
                    f"{corner_frequency_hz!r},{sample_rate_hz!r},{frequency_hz!r},"
                    f"{diffusion!r},{direct!r}\n"
                )
    print(f"largest relative difference, direct sum vs closed form: {worst:.2e}")


if __name__ == "__main__":
    main()
