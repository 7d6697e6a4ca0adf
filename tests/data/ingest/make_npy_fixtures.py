"""Writes the .npy and text fixtures for the ingest unit tests, and expected.json.

Run from this directory: python3 make_npy_fixtures.py
Made with numpy 2.4.6 (python3); no other package is used.

The .npy files are written by numpy itself (numpy.save, and numpy.lib.format.write_array for
format version 2.0), so they follow NEP 1 "A Simple File Format for NumPy Arrays" as numpy
implements it. The expected values in expected.json are computed by numpy from the same
arrays: per axis the length, the first and last sample, the sample at index 517 and the sum
(float64 for floats, exact Python int for integer counts). For the text fixtures the expected
values come from numpy.loadtxt reading the written file back, so they are what numpy makes of
the text, independent of the Rust parser. Data are seeded random numbers of an invented
scenario (a bead jiggling in a trap), not measurements.
"""

import json

import numpy as np
from numpy.lib import format as npy_format

rng = np.random.default_rng(20240611)
expected = {"numpy_version": np.__version__, "files": {}}


def axes_of(arr, rows_are_samples=True):
    """Axes of a 1-D or 2-D array as numpy indexes them."""
    if arr.ndim == 1:
        return [arr]
    if rows_are_samples:
        return [arr[:, j] for j in range(arr.shape[1])]
    return [arr[j, :] for j in range(arr.shape[0])]


def summary(axis):
    if np.issubdtype(axis.dtype, np.integer):
        conv = int
        total = int(sum(int(v) for v in axis))
    else:
        # Floats are stored as their repr strings, which name the float64 exactly; the Rust
        # test parses them with str::parse (correctly rounded) rather than through a JSON
        # number, whose parsing in serde_json is not exact by default.
        def conv(v):
            return repr(float(v))
        total = conv(np.sum(axis.astype(np.float64)))
    return {
        "len": int(axis.shape[0]),
        "first": conv(axis[0]),
        "last": conv(axis[-1]),
        "at_517": conv(axis[517]),
        "sum": total,
    }


def save(name, arr, version=(1, 0), rows_are_samples=True, summarise=True):
    with open(name, "wb") as f:
        npy_format.write_array(f, arr, version=version)
    entry = {
        "shape": list(arr.shape),
        "descr": npy_format.dtype_to_descr(arr.dtype) if arr.dtype.names is None else "structured",
        "version": list(version),
        "fortran_order": bool(arr.flags.f_contiguous and not arr.flags.c_contiguous),
    }
    if summarise:
        entry["axes"] = [summary(a) for a in axes_of(arr, rows_are_samples)]
    expected["files"][name] = entry


# Readable arrays (N between 1100 and 1500 so they pass MIN_SAMPLES = 1024).
save("f8_v1.npy", rng.normal(0.0, 0.05, 1200))  # volts from a detector, float64, version 1.0
save("f4_v2.npy", rng.normal(0.0, 12.0, 1100).astype(np.float32), version=(2, 0))  # nm, f32
save("i2_v1.npy", rng.integers(-3000, 3000, 1100).astype(np.int16))  # ADC counts
save("i1_v1.npy", rng.integers(-128, 128, 1100).astype(np.int8))
save("i8_v1.npy", rng.integers(-(2**40), 2**40, 1100).astype(np.int64))
save("i4_axes_by_samples.npy", rng.integers(-20000, 20000, (2, 1100)).astype(np.int32),
     rows_are_samples=False)  # shape (C, N)
save("f4_n3.npy", rng.normal(0.0, 8.0, (1100, 3)).astype(np.float32))  # shape (N, 3)
save("f8_fortran.npy", np.asfortranarray(rng.normal(0.0, 0.02, (1100, 2))))  # Fortran order
# Unsupported dtypes (small: the header is rejected before the data are looked at).
save("f8_big_endian.npy", rng.normal(0.0, 1.0, 16).astype(">f8"), summarise=False)
save("c16_complex.npy", (rng.normal(0.0, 1.0, 16) + 1j * rng.normal(0.0, 1.0, 16)),
     summarise=False)
save("structured.npy", np.zeros(16, dtype=[("x", "<f8"), ("y", "<f8")]), summarise=False)

# A CSV written by numpy.savetxt: time in milliseconds at 50 kHz, two position columns in nm,
# with a comment line before the header.
fs_hz = 50_000.0
n = 1100
t_ms = np.arange(n) / fs_hz * 1e3
xy = rng.normal(0.0, 15.0, (n, 2))
with open("numpy_savetxt.csv", "w", newline="") as f:
    f.write("# invented scenario: bead at 50 kHz, positions in nm\n")
    np.savetxt(f, np.column_stack([t_ms, xy]), fmt="%.10g", delimiter=",",
               header="time_ms,x_nm,y_nm", comments="")
back = np.loadtxt("numpy_savetxt.csv", delimiter=",", skiprows=2)
t_s = back[:, 0] * 1e-3
expected["files"]["numpy_savetxt.csv"] = {
    "sample_rate_hz": repr(float((n - 1) / (t_s[-1] - t_s[0]))),
    "axes": [summary(back[:, 1]), summary(back[:, 2])],
}

# A TSV with CRLF line ends, a byte order mark and bracketed units, three axes in volts and no
# time column.
v = rng.normal(0.0, 0.1, (n, 3))
with open("numpy_savetxt_crlf.tsv", "w", newline="") as f:
    f.write("\ufeff")
    np.savetxt(f, v, fmt="%.9e", delimiter="\t", header="x [V]\ty [V]\tz [V]", comments="",
               newline="\r\n")
back = np.loadtxt("numpy_savetxt_crlf.tsv", delimiter="\t", skiprows=1, encoding="utf-8-sig")
expected["files"]["numpy_savetxt_crlf.tsv"] = {
    "axes": [summary(back[:, j]) for j in range(3)],
}

with open("expected.json", "w") as f:
    json.dump(expected, f, indent=1, sort_keys=True)
    f.write("\n")
