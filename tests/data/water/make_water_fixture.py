"""Reference properties of liquid water at 0.101325 MPa from 0.5 to 99 C, for src/water.

Density: the IAPWS-95 formulation for the thermodynamic properties of ordinary water
(Wagner & Pruss, J. Phys. Chem. Ref. Data 31, 387 (2002)), solved for the density at
p = 0.101325 MPa and T = t + 273.15 K (t in ITS-90 degrees Celsius).
Viscosity: the IAPWS 2008 formulation (Huber et al., J. Phys. Chem. Ref. Data 38, 101 (2009)) at
that density, with the critical enhancement mu2 = 1. The script also checks that the package's
own viscosity for the same state (which includes mu2 when it applies) equals it to 1e-12, so
mu2 = 1 is exact to that level here.

Both come from the `iapws` package (PyPI), an implementation independent of trapwise.
Written with Python 3.11, iapws 1.5.5 (numpy 2.4.6 / scipy 1.17.1 installed, used by iapws).
Run from this directory:  python3 make_water_fixture.py
Output: iapws_liquid_0.1mpa.csv with columns temperature_c, density_kg_per_m3, viscosity_pa_s;
every value is written with repr(), so the Rust test parses the exact binary64 values.
"""

import iapws
from iapws import IAPWS95
from iapws._iapws import _Viscosity

PRESSURE_MPA = 0.101325
ZERO_CELSIUS_K = 273.15

TEMPERATURES_C = [0.5] + [float(t) for t in range(1, 100)]


def main():
    rows = []
    for t in TEMPERATURES_C:
        state = IAPWS95(T=t + ZERO_CELSIUS_K, P=PRESSURE_MPA)
        if state.phase != "Liquid":
            raise SystemExit(f"{t} C is not liquid at {PRESSURE_MPA} MPa: {state.phase}")
        mu = _Viscosity(state.rho, t + ZERO_CELSIUS_K)
        if abs(state.mu / mu - 1.0) > 1e-12:
            raise SystemExit(f"critical enhancement not negligible at {t} C")
        rows.append((t, float(state.rho), float(mu)))
    with open("iapws_liquid_0.1mpa.csv", "w", encoding="ascii") as out:
        out.write(f"# iapws {iapws.__version__}: IAPWS-95 density and IAPWS 2008 viscosity "
                  f"(mu2 = 1) at {PRESSURE_MPA} MPa; made by make_water_fixture.py\n")
        out.write("temperature_c,density_kg_per_m3,viscosity_pa_s\n")
        for t, rho, mu in rows:
            out.write(f"{t!r},{rho!r},{mu!r}\n")


if __name__ == "__main__":
    main()
