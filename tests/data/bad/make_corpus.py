#!/usr/bin/env python3
"""Writes the bad-input corpus in tests/data/bad/ and its expectations.

Every file here must be refused: the API answers 4xx naming the place, the
command line exits 2 naming the file and line, nothing is stored and the
server keeps serving. `expect.tsv` lists, per file, the line a problem must
name ('-' when the format has no lines or the whole file is the problem) and
a phrase the reasons must contain (lower case; '-' for any).

Run from the repository root: python3 tests/data/bad/make_corpus.py
Needs numpy (for the NPY/NPZ cases). Deterministic.
"""
import io
import os
import zipfile

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
EXPECT = []


def put(name, data, line="-", phrase="-"):
    if isinstance(data, str):
        data = data.encode("utf-8")
    with open(os.path.join(HERE, name), "wb") as f:
        f.write(data)
    EXPECT.append((name, str(line), phrase))


def npy_bytes(array):
    buf = io.BytesIO()
    np.save(buf, array)
    return buf.getvalue()


def npz_bytes(**arrays):
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


GOOD = "x,t,C,err\n-1,0.5,0.2,0.01\n0,0.5,0.6,0.01\n1,0.5,0.2,0.01\n"

# --- CSV, long layout -------------------------------------------------------
put("csv-empty.csv", "")
put("csv-header-only.csv", "x,t,C,err\n")
put("csv-only-comments.csv", "# nothing here\n# still nothing\n")
put("csv-nan.csv", GOOD + "2,0.5,nan,0.01\n", 5)
put("csv-nan-spellings.csv", GOOD + "2,0.5,NaN,0.01\n3,0.5,-nan,0.01\n", 5)
put("csv-inf-spellings.csv", GOOD + "2,0.5,inf,0.01\n3,0.5,-Infinity,0.01\n", 5)
put("csv-overflow-1e400.csv", GOOD + "2,0.5,1e400,0.01\n", 5)
put("csv-tiny-error-underflows.csv", GOOD + "2,0.5,0.1,1e-400\n", 5)
put("csv-negative-error.csv", GOOD + "2,0.5,0.1,-0.01\n", 5)
put("csv-zero-error.csv", GOOD + "2,0.5,0.1,0\n", 5)
put("csv-duplicate-point.csv", GOOD + "0,0.5,0.6,0.01\n", 5)
put("csv-ragged-rows.csv", GOOD + "2,0.5,0.1\n3,0.5,0.1,0.01,7\n", 5)
put("csv-non-numeric.csv", GOOD + "2,0.5,abc,0.01\n", 5)
put("csv-negative-time.csv", GOOD + "0,-1,0.5,0.01\n", 5)
put("csv-fractional-offset.csv", GOOD + "0.5,1.0,0.5,0.01\n", 5)
put("csv-truncated-row.csv", GOOD + "2,0.5,", 5)
put("csv-binary-garbage.csv", bytes((i * 97 + 13) % 256 for i in range(4096)))
put("csv-latin1.csv", GOOD.encode() + b"# caf\xe9\n2,0.5,0.1,0.01\n", 5)
put("csv-utf16-bom.csv", "\ufeffx,t,C\n0,0,1\n".encode("utf-16"))
put("csv-missing-value-column.csv", "x,t\n0,0\n1,0\n", 1)
put("csv-unknown-header.csv", "alpha,beta,gamma\n1,2,3\n", 1)
put("csv-data-before-header.csv", "0,0.5,1\nx,t,C\n", 1)
put("csv-million-columns.csv", "x,t,C\n" + ",".join(["1"] * 1_000_000) + "\n", 2)
put("csv-nul-bytes.csv", b"x,t,C\n0,0\x00,1\n", 2)
put("csv-huge-offset.csv", GOOD + "99999999999,0.5,0.1,0.01\n", 5)

# --- CSV, wide layout -------------------------------------------------------
put("wide-bad-offset.csv", "t,-1,zero,1\n0.5,0.2,0.6,0.2\n", 1)
put("wide-nan.csv", "t,-1,0,1\n0.5,0.2,nan,0.2\n", 2)
put("wide-ragged.csv", "t,-1,0,1\n0.5,0.2,0.6\n", 2)
put("wide-duplicate-time.csv", "t,-1,0,1\n0.5,0.2,0.6,0.2\n0.5,0.2,0.6,0.2\n", 3)

# --- JSON -------------------------------------------------------------------
put("json-empty.json", "")
put("json-truncated.json", '{"x":[0,1],"t":[0],"C":[[1,', 1)
put("json-deep-nesting.json", "[" * 100_000 + "]" * 100_000)
put("json-not-an-object.json", "[1,2,3]")
put("json-shape-mismatch.json", '{"x":[0,1],"t":[0,1],"C":[[1,0],[0.5]]}', "-", "c[1]")
put("json-nan-literal.json", '{"x":[0],"t":[0],"C":[[NaN]]}', 1)
put("json-1e400.json", '{"x":[0],"t":[0],"C":[[1e400]]}', 1)
put("json-string-value.json", '{"x":[0],"t":[0],"C":[["one"]]}', "-", "c[0][0]")
put("json-missing-x.json", '{"t":[0],"C":[[1]]}', "-", "x")
put("json-negative-error.json", '{"x":[0],"t":[0],"C":[[1]],"err":[[-0.1]]}', "-", "err[0][0]")
put("json-duplicate-offset.json", '{"x":[0,0],"t":[0],"C":[[0.5,0.5]]}', "-", "x")
put("json-negative-time.json", '{"x":[0],"t":[-2],"C":[[1]]}', "-", "t")
put("json-bad-meta.json", '{"x":[0],"t":[0],"C":[[1]],"meta":{"alpha":-3}}', "-", "alpha")

# --- NPY / NPZ --------------------------------------------------------------
valid_npz = npz_bytes(C=np.eye(2), t=np.array([0.0, 1.0]), x=np.array([0, 1]))
put("npz-truncated.npz", valid_npz[: len(valid_npz) // 2])
put("npz-garbage-after-magic.npz", b"PK\x03\x04" + bytes(range(256)) * 4)
put("npz-missing-C.npz", npz_bytes(t=np.array([0.0]), x=np.array([0])), "-", "c")
put("npz-shape-mismatch.npz", npz_bytes(C=np.ones((2, 3)), t=np.array([0.0, 1.0]), x=np.array([0, 1])), "-", "x")
put("npz-nan.npz", npz_bytes(C=np.array([[np.nan]]), t=np.array([0.0]), x=np.array([0])), "-", "c")
put("npz-string-array.npz", npz_bytes(C=np.array([["a"]]), t=np.array([0.0]), x=np.array([0])), "-", "c")
put("npy-one-dimensional.npy", npy_bytes(np.ones(4)))
put("npy-truncated.npy", npy_bytes(np.ones((3, 3)))[:90])
put("npy-bad-header.npy", b"\x93NUMPY\x01\x00\x10\x00{'descr': oops}   \n")
put("npy-three-dimensional.npy", npy_bytes(np.ones((2, 2, 2))))

with open(os.path.join(HERE, "expect.tsv"), "w") as f:
    f.write("# file\tline\tphrase\n")
    for name, line, phrase in EXPECT:
        f.write(f"{name}\t{line}\t{phrase}\n")
print(f"{len(EXPECT)} files")
