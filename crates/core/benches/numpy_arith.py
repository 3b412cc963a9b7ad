#!/usr/bin/env python3
"""Times the arithmetic of the numpy reference (tests/reference/diagnostics.py) on in-memory
arrays of the kernel benchmark's size, for the benchmark's "times faster than numpy" line.

The fields are made here, with numpy, in the benchmark's shapes (a 0.25 degree global grid and
37 levels by default, float64 as the reference computes); only the reference's own per-step
work is timed: ``horizontal_masks`` once, ``geostrophic_wind`` at every level and
``layer_fields`` for every adjacent layer (which computes the geostrophic winds of its two
levels again, as the reference does). Reading files and box means are left out.

Usage: numpy_arith.py [--step DEG] [--levels N]; prints one JSON object on stdout.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "..", "tests", "reference"))

import diagnostics as ref  # noqa: E402  (the reference lives outside this package)

# The benchmark's 37 pressure levels, hPa (crates/core/benches/kernel.rs).
LEVELS_37 = [
    1000.0, 975.0, 950.0, 925.0, 900.0, 875.0, 850.0, 825.0, 800.0, 775.0, 750.0, 700.0, 650.0,
    600.0, 550.0, 500.0, 450.0, 400.0, 350.0, 300.0, 250.0, 225.0, 200.0, 175.0, 150.0, 125.0,
    100.0, 70.0, 50.0, 30.0, 20.0, 10.0, 7.0, 5.0, 3.0, 2.0, 1.0,
]


def make_dataset(step: float, n_levels: int) -> ref.Dataset:
    """The kernel benchmark's fields (same formulas), as float64 arrays."""
    n_lat = int(round(180.0 / step)) + 1
    n_lon = int(round(360.0 / step))
    lat = -90.0 + step * np.arange(n_lat)
    lon = step * np.arange(n_lon)
    p = np.array(LEVELS_37[:n_levels])
    pk = p[:, None, None]
    la = lat[None, :, None]
    lo = lon[None, None, :]
    t = (288.0 - 60.0 * (1.0 - (pk / 1000.0) ** 0.19) - 15.0 * np.tanh((la - 45.0) / 10.0)
         + 3.0 * np.sin(np.deg2rad(lo) * 4.0))
    t = np.broadcast_to(t, (n_levels, n_lat, n_lon)).astype(np.float32).astype(np.float64)
    z = np.empty_like(t)
    z[0] = 100.0 + 50.0 * np.sin(np.deg2rad(lat) * 3.0)[:, None] * np.cos(np.deg2rad(lon))[None, :]
    for k in range(1, n_levels):
        tm = 0.5 * (t[k - 1] + t[k])
        z[k] = z[k - 1] + 287.05 / 9.80665 * tm * np.log(p[k - 1] / p[k])
    k_idx = np.arange(n_levels)[:, None, None]
    shape = (n_levels, n_lat, n_lon)
    u = np.broadcast_to(10.0 + k_idx * 0.5 * np.cos(np.deg2rad(la)), shape).copy()
    v = np.broadcast_to(2.0 * np.sin(np.deg2rad(lo) * 3.0) + la * 0.01, shape).copy()
    q = np.broadcast_to(0.01 * np.exp(-k_idx / 5.0), shape).copy()
    return ref.Dataset(
        name="bench",
        time_iso="2026-01-01T00:00:00Z",
        lat=lat,
        lon=lon,
        periodic=True,
        p_hpa=p,
        fields={"geopotential": z, "temperature": t, "u": u, "v": v, "humidity": q},
        surface={"surface_pressure": np.full((n_lat, n_lon), 1010.0)},
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--step", type=float, default=0.25)
    parser.add_argument("--levels", type=int, default=37)
    args = parser.parse_args()
    ds = make_dataset(args.step, max(2, min(args.levels, 37)))
    n_levels = len(ds.p_hpa)
    start = time.perf_counter()
    masks = ref.horizontal_masks(ds)
    for k in range(n_levels):
        ref.geostrophic_wind(ds, masks, k)
    levels_done = time.perf_counter()
    for kb in range(n_levels - 1):
        ref.layer_fields(ds, masks, kb, kb + 1)
    end = time.perf_counter()
    print(json.dumps({
        "n_lat": len(ds.lat),
        "n_lon": len(ds.lon),
        "levels": n_levels,
        "seconds": end - start,
        "levels_seconds": levels_done - start,
        "layers_seconds": end - levels_done,
    }))


if __name__ == "__main__":
    main()
