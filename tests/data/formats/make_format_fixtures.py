"""Writes the fixtures of the compressed, archive and European-locale readers.

Run from this directory: python3 make_format_fixtures.py
Made with numpy 2.4.6 (python3, from PyPI) and Python's own csv, gzip and zipfile modules.

Every file holds the same record, first written by numpy.save as record.npy (float64, shape
(8192, 2), C order): a bead of the invented "osprey" instrument, two axes in nm, seeded
first-order autoregressive noise (not a measurement). The other files hold the same numbers:

- record_xy.npz (numpy.savez, stored members x and y, 1-D) and record_xy_deflated.npz
  (numpy.savez_compressed, the same deflated);
- record_single.npz (numpy.savez: one 2-D member "trace" of shape (8192, 2) and a member "gain"
  of one sample, too short to be the recording);
- record_semicolon.csv (csv module, delimiter ';', decimal comma: each number is Python's
  repr, which reads back to the same float64, with the point replaced by a comma, as a
  spreadsheet in a European locale writes it; header x_nm;y_nm);
- record.csv.gz (csv module with the default dialect, repr numbers, then gzip.compress) and
  record.npy.gz (gzip of record.npy's bytes);
record_um.csv (csv module, header x_um,y_um, the record divided by 1000 by numpy, written
as repr) with record_um_in_nm.npy (numpy's float64 product of those values and 1000, what the
reader's conversion to nm must give bit for bit);
and the bad cases: one_column_comma.csv (a header of one column over rows with a comma),
mixed_marks.csv (semicolons, with a decimal comma in one row and a point in another),
corrupt.csv.gz (record.csv.gz with bytes in the middle of the deflate data inverted),
truncated.csv.gz (its first half), bomb.csv.gz (16 MiB of the text "0\n", about 16 KiB
compressed), not_an_archive.npz (the first 100 bytes of record_xy.npz) and
no_candidate.npz (numpy.savez of two members of 10 samples).
"""

import csv
import gzip
import io

import numpy as np

rng = np.random.default_rng(20261203)
N = 8192
a = 0.9  # lag-one correlation of the autoregressive noise
record = np.zeros((N, 2))
noise = rng.normal(0.0, 12.0, size=(N, 2))
for n in range(1, N):
    record[n] = a * record[n - 1] + noise[n]

np.save("record.npy", record)
np.savez("record_xy.npz", x=record[:, 0], y=record[:, 1])
np.savez_compressed("record_xy_deflated.npz", x=record[:, 0], y=record[:, 1])
np.savez("record_single.npz", trace=record, gain=np.array([0.5]))
np.savez("no_candidate.npz", a=np.arange(10.0), b=np.arange(10.0))


def decimal_comma(value):
    return repr(float(value)).replace(".", ",")


with open("record_semicolon.csv", "w", newline="") as f:
    writer = csv.writer(f, delimiter=";", lineterminator="\r\n")
    writer.writerow(["x_nm", "y_nm"])
    for row in record:
        writer.writerow([decimal_comma(v) for v in row])

plain = io.StringIO()
writer = csv.writer(plain, lineterminator="\n")
writer.writerow(["x_nm", "y_nm"])
for row in record:
    writer.writerow([repr(float(v)) for v in row])
plain_gz = gzip.compress(plain.getvalue().encode("ascii"), mtime=0)
with open("record.csv.gz", "wb") as f:
    f.write(plain_gz)
with open("record.npy", "rb") as f:
    npy_bytes = f.read()
with open("record.npy.gz", "wb") as f:
    f.write(gzip.compress(npy_bytes, mtime=0))

corrupt = bytearray(plain_gz)
middle = len(corrupt) // 2
for i in range(middle, middle + 64):
    corrupt[i] ^= 0xFF
with open("corrupt.csv.gz", "wb") as f:
    f.write(bytes(corrupt))
with open("truncated.csv.gz", "wb") as f:
    f.write(plain_gz[: len(plain_gz) // 2])
with open("bomb.csv.gz", "wb") as f:
    f.write(gzip.compress(b"0\n" * (8 << 20), mtime=0))
with open("record_xy.npz", "rb") as f:
    head = f.read(100)
with open("not_an_archive.npz", "wb") as f:
    f.write(head)

with open("one_column_comma.csv", "w", newline="") as f:
    writer = csv.writer(f, delimiter=";", lineterminator="\n")
    writer.writerow(["x_nm"])
    for v in record[:, 0]:
        writer.writerow([decimal_comma(v)])

with open("mixed_marks.csv", "w", newline="") as f:
    writer = csv.writer(f, delimiter=";", lineterminator="\n")
    writer.writerow(["x_nm", "y_nm"])
    for i, row in enumerate(record):
        if i == 3:
            writer.writerow([repr(float(v)) for v in row])
        else:
            writer.writerow([decimal_comma(v) for v in row])

in_um = record / 1000.0
with open("record_um.csv", "w", newline="") as f:
    writer = csv.writer(f, lineterminator="\n")
    writer.writerow(["x_um", "y_um"])
    for row in in_um:
        writer.writerow([repr(float(v)) for v in row])
np.save("record_um_in_nm.npy", in_um * 1000.0)
