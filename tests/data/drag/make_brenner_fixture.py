"""Reference values of Brenner's exact drag factor for a sphere moving perpendicular to a wall.

Brenner, "The slow motion of a sphere through a viscous fluid towards a plane surface",
Chem. Eng. Sci. 16, 242 (1961). With alpha = arccosh(h/R), h the height of the sphere centre
above the wall and R the sphere radius:

    gamma_perp / gamma_0 = (4/3) sinh(alpha) * sum_{n>=1} n(n+1) / ((2n-1)(2n+3)) *
        { [2 sinh((2n+1) alpha) + (2n+1) sinh(2 alpha)]
          / [4 sinh^2((n+1/2) alpha) - (2n+1)^2 sinh^2(alpha)] - 1 }

The series is evaluated here literally, in 60-digit arithmetic with mpmath, term by term until a
term falls below 1e-45 of the partial sum, so that it is an independent check of the
overflow-safe, rearranged double-precision sum in src/drag/mod.rs. Each h/R is a binary64 value
and is written with repr(), so the Rust test parses exactly the value used here.

Written with Python 3, mpmath 1.3.0 (numpy 2.4.6 / scipy 1.17.1 installed but not needed).
Run from this directory:  python3 make_brenner_fixture.py
Output: brenner_axial.csv with columns height_over_radius, brenner_axial_factor.
"""

import mpmath as mp

mp.mp.dps = 60

HEIGHT_OVER_RADIUS = [
    1.0 + 2e-6,
    1.0001,
    1.001,
    1.01,
    1.02,
    1.1,
    1.25,
    1.5,
    2.0,
    3.0,
    5.0,
    10.0,
    100.0,
    1000.0,
    1.0e5,
    1.0e7,
]


def brenner_factor(height_over_radius: float) -> mp.mpf:
    """Brenner's series, summed literally in high precision."""
    ratio = mp.mpf(height_over_radius)  # exact binary64 value
    alpha = mp.acosh(ratio)
    total = mp.mpf(0)
    n = 1
    while True:
        m = 2 * n + 1
        weight = mp.mpf(n * (n + 1)) / ((2 * n - 1) * (2 * n + 3))
        numerator = 2 * mp.sinh(m * alpha) + m * mp.sinh(2 * alpha)
        denominator = 4 * mp.sinh((n + mp.mpf(1) / 2) * alpha) ** 2 - m**2 * mp.sinh(alpha) ** 2
        term = weight * (numerator / denominator - 1)
        total += term
        if abs(term) < mp.mpf("1e-45") * abs(total):
            break
        n += 1
    return mp.mpf(4) / 3 * mp.sinh(alpha) * total


def main() -> None:
    with open("brenner_axial.csv", "w", encoding="ascii") as out:
        out.write("height_over_radius,brenner_axial_factor\n")
        for height_over_radius in HEIGHT_OVER_RADIUS:
            factor = brenner_factor(height_over_radius)
            out.write(f"{height_over_radius!r},{mp.nstr(factor, 25)}\n")


if __name__ == "__main__":
    main()
