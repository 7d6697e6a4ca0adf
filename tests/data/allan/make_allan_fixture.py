"""Fixture for the allan module: the overlapping Allan deviation of a record, by allantools.

The record is an exact AR(1) realisation of Ornstein-Uhlenbeck motion (the overdamped limit of
Norrelykke & Flyvbjerg, Phys. Rev. E 83, 041103 (2011)): x_(j+1) = c x_j + sqrt(1 - c^2) xi_j,
c = exp(-2 pi fc / fs), fc = 300 Hz, fs = 10 kHz, unit variance, plus an offset of 3 and a linear
drift of 0.5 per second (the estimator must not care about either beyond what they are), 3000
samples from numpy's default_rng(20261203).

allantools.oadev (overlapping Allan deviation, NIST SP 1065 eq. 11) is called with
data_type="freq": the samples are treated as frequency data y, turned into phase by a cumulative
sum divided by the rate, and sigma^2(m tau0) = sum (x_(n+2m) - 2 x_(n+m) + x_n)^2 /
(2 (m tau0)^2 (N - 2m)), which for position samples is the Allan variance of block averages of m
samples in the record's unit, the definition trapwise uses.

Written with Python 3, allantools 2024.06, numpy 2.4.6 (from PyPI), run offline.
Run from this directory:  python3 make_allan_fixture.py
Output: record.csv (one sample a line), oadev.csv (header, then m, tau_s, deviation); floats
written with repr(), which round-trips binary64 exactly.
"""

import math

import allantools
import numpy as np

FS = 10_000.0
FC = 300.0
N = 3000

rng = np.random.default_rng(20261203)
c = math.exp(-2.0 * math.pi * FC / FS)
kick = math.sqrt(1.0 - c * c)
x = np.empty(N)
x[0] = rng.standard_normal()
for j in range(1, N):
    x[j] = c * x[j - 1] + kick * rng.standard_normal()
x += 3.0 + 0.5 * np.arange(N) / FS

ms = []
m = 1
while 3 * m <= N:
    ms.append(m)
    m *= 2
taus = np.array(ms, dtype=float) / FS
taus_out, dev, _err, _n = allantools.oadev(x, rate=FS, data_type="freq", taus=taus)
assert len(taus_out) == len(ms), (taus_out, ms)

with open("record.csv", "w") as f:
    for v in x:
        f.write(repr(float(v)) + "\n")
with open("oadev.csv", "w") as f:
    f.write("m,tau_s,deviation\n")
    for m, t, d in zip(ms, taus_out, dev):
        assert abs(t - m / FS) < 1e-15
        f.write(f"{m},{repr(float(t))},{repr(float(d))}\n")
