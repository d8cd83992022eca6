"""Storage settings of the grid file, chosen by measurement (issue 12).

    python benchmarks/storage.py GRID.h5 [--repeats 3]

Reads the ion-fraction cube (the bulk of a grid file) and the per-point arrays of an existing grid
file and writes them again, tile by tile as ``ionbal grid`` does, with each candidate setting:
gzip levels 1/4/6 with and without shuffle, lzf, no filter, the Fletcher-32 checksum on or off, a
few chunk shapes, float32.  Per setting: write time (median of the repeats, CPU seconds of this
process; wall seconds in brackets) and file size.  Interleaved: every repeat runs every setting once.
"""
from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time

import h5py
import numpy as np

SETTINGS = [
    # name, filters, chunk (species, T, state) or None for the file's own, dtype
    ("none", {}, None, "f8"),
    ("gzip1", dict(compression="gzip", compression_opts=1), None, "f8"),
    ("gzip1+shuffle (current)", dict(compression="gzip", compression_opts=1, shuffle=True), None, "f8"),
    ("gzip1+shuffle+fletcher32 (main)", dict(compression="gzip", compression_opts=1, shuffle=True,
                                              fletcher32=True), None, "f8"),
    ("gzip4+shuffle", dict(compression="gzip", compression_opts=4, shuffle=True), None, "f8"),
    ("gzip6+shuffle", dict(compression="gzip", compression_opts=6, shuffle=True), None, "f8"),
    ("lzf+shuffle", dict(compression="lzf", shuffle=True), None, "f8"),
    ("gzip1+shuffle chunks 1x64x241", dict(compression="gzip", compression_opts=1, shuffle=True),
     (1, 64, 241), "f8"),
    ("gzip1+shuffle chunks 8x64x64", dict(compression="gzip", compression_opts=1, shuffle=True),
     (8, 64, 64), "f8"),
    ("gzip1+shuffle float32", dict(compression="gzip", compression_opts=1, shuffle=True), None, "f4"),
]


def write(path, cube, chunks, filters, dtype, tile):
    n_sp, nt, ns = cube.shape
    tt, ts = tile
    t_cpu, t_wall = time.process_time(), time.perf_counter()
    with h5py.File(path, "w") as f:
        ds = f.create_dataset("ion_fraction", shape=cube.shape, dtype=dtype, chunks=chunks, **filters)
        for t0 in range(0, nt, tt):
            for s0 in range(0, ns, ts):
                ds[:, t0:t0 + tt, s0:s0 + ts] = cube[:, t0:t0 + tt, s0:s0 + ts].astype(dtype, copy=False)
    return time.process_time() - t_cpu, time.perf_counter() - t_wall, os.path.getsize(path)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("grid")
    ap.add_argument("--repeats", type=int, default=3)
    a = ap.parse_args()
    with h5py.File(a.grid, "r") as f:
        cube = f["ion_fraction"][()].astype(np.float64)
        own = f["ion_fraction"].chunks
    tile = (own[1], own[2])
    tmp = tempfile.mkdtemp()
    res = {name: [] for name, *_ in SETTINGS}
    for _ in range(a.repeats):
        for name, filt, chunks, dtype in SETTINGS:
            path = os.path.join(tmp, "x.h5")
            res[name].append(write(path, cube, chunks or own, filt, dtype, tile))
            os.unlink(path)
    raw = cube.nbytes
    print(f"ion_fraction cube {cube.shape}, {raw / 1e6:.0f} MB as float64; chunks of the file {own}; "
          f"{a.repeats} interleaved repeats")
    base = statistics.median(r[0] for r in res["gzip1+shuffle+fletcher32 (main)"])
    for name, *_ in SETTINGS:
        cpu = statistics.median(r[0] for r in res[name])
        wall = statistics.median(r[1] for r in res[name])
        size = res[name][0][2]
        print(f"  {name:<34} write {cpu:6.2f} s CPU ({wall:6.2f} s wall)  {cpu / base:5.2f}x of main's  "
              f"size {size / 1e6:7.1f} MB ({size / raw:5.1%} of raw)")


if __name__ == "__main__":
    main()
