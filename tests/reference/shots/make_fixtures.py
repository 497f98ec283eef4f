#!/usr/bin/env python3
"""Synthetic shot-file and map fixtures for spreadscope's HDF5/NPZ readers.

SYNTHETIC data: random bits from numpy's PCG64 generator, no physics and no
laboratory. The same shots are written four ways, so the Rust tests can check
that every reader yields the same counts as the CSV reader:

- shots.csv            CSV `state_id,t,init_bits,meas_bits` (bit 1 = up,
                       site 0 first), shots in shuffled order;
- shots.npz            numpy.savez: `init` uint8 states x sites, `meas` bool
                       shots x sites, `state` int64, `t` float64 per shot;
- shots_chunked.h5     h5py: `init` uint8, `meas` bool (HDF5 enum) chunked
                       and gzip-compressed, `state` int64, `t` float64;
- shots_contiguous.h5  h5py: `init` int32, `meas` uint8 (contiguous),
                       `state` uint16, `t` float32 (times exact in binary);
- shots_bad.h5         like shots_contiguous.h5 with four defects: a bit
                       value 2 (meas[4, 1]), a state index 9 (state[6]), a
                       negative time (t[7]) and init[2, 3] = 5;
- map.h5               a correlation map: `C` float64 times x offsets with
                       one NaN at a masked point, `t`, `x` int32, `err`,
                       `mask` bool.

The library versions are written into every file (CSV comment, HDF5
attribute `generator`, NPZ array `generator`).

Run: python3 tests/reference/shots/make_fixtures.py
"""

import os

import h5py
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
GENERATOR = f"make_fixtures.py; numpy {np.__version__}; h5py {h5py.__version__}; HDF5 {h5py.version.hdf5_version}"

rng = np.random.default_rng(20240611)
sites, states = 6, 5
times = np.array([0.0, 0.5, 1.25])
init = rng.integers(0, 2, size=(states, sites), dtype=np.uint8)
rows = []
for s in range(states):
    for t in times:
        for _ in range(int(rng.integers(1, 4))):
            rows.append((s, t, rng.integers(0, 2, size=sites, dtype=np.uint8)))
order = rng.permutation(len(rows))
rows = [rows[k] for k in order]
state = np.array([r[0] for r in rows], dtype=np.int64)
t = np.array([r[1] for r in rows], dtype=np.float64)
meas = np.array([r[2] for r in rows], dtype=np.uint8)


def bits(row):
    return "".join(str(int(b)) for b in row)


with open(os.path.join(HERE, "shots.csv"), "w") as f:
    f.write(f"# SYNTHETIC shots; {GENERATOR}\n")
    f.write("state_id,t,init_bits,meas_bits\n")
    for s, tt, m in rows:
        f.write(f"s{s},{float(tt)!r},{bits(init[s])},{bits(m)}\n")

np.savez(
    os.path.join(HERE, "shots.npz"),
    init=init,
    meas=meas.astype(bool),
    state=state,
    t=t,
    generator=np.array(GENERATOR),
)

with h5py.File(os.path.join(HERE, "shots_chunked.h5"), "w") as f:
    f.attrs["generator"] = GENERATOR
    f.attrs["synthetic"] = True
    f.create_dataset("init", data=init)
    f.create_dataset("meas", data=meas.astype(bool), chunks=(4, sites), compression="gzip")
    f.create_dataset("state", data=state, chunks=(8,), compression="gzip")
    f.create_dataset("t", data=t)

with h5py.File(os.path.join(HERE, "shots_contiguous.h5"), "w") as f:
    f.attrs["generator"] = GENERATOR
    f.attrs["synthetic"] = True
    f.create_dataset("init", data=init.astype(np.int32))
    f.create_dataset("meas", data=meas)
    f.create_dataset("state", data=state.astype(np.uint16))
    f.create_dataset("t", data=t.astype(np.float32))

bad_meas = meas.copy()
bad_meas[4, 1] = 2
bad_state = state.astype(np.int64)
bad_state[6] = 9
bad_t = t.copy()
bad_t[7] = -0.5
bad_init = init.astype(np.int32)
bad_init[2, 3] = 5
with h5py.File(os.path.join(HERE, "shots_bad.h5"), "w") as f:
    f.attrs["generator"] = GENERATOR
    f.create_dataset("init", data=bad_init)
    f.create_dataset("meas", data=bad_meas)
    f.create_dataset("state", data=bad_state)
    f.create_dataset("t", data=bad_t)

map_t = np.array([0.0, 1.0, 2.0])
map_x = np.array([-2, -1, 0, 1, 2], dtype=np.int32)
C = np.array(
    [
        [0.0, 0.0, 1.0, 0.0, 0.0],
        [0.05, 0.2, 0.5, 0.2, 0.05],
        [0.1, 0.25, 0.3, 0.25, np.nan],
    ]
)
err = np.full(C.shape, 0.01)
mask = ~np.isnan(C)
with h5py.File(os.path.join(HERE, "map.h5"), "w") as f:
    f.attrs["generator"] = GENERATOR
    f.attrs["synthetic"] = True
    f.create_dataset("C", data=C, chunks=(1, 5), compression="gzip")
    f.create_dataset("t", data=map_t)
    f.create_dataset("x", data=map_x)
    f.create_dataset("err", data=err)
    f.create_dataset("mask", data=mask)

print(f"{len(rows)} shots written; {GENERATOR}")
