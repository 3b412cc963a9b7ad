#!/usr/bin/env python3
"""The batch job done the usual scripted way, for the compute benchmark's comparison.

Reads every time step of a pressure-level file with netCDF4, computes the diagnostics of every
adjacent layer with the project's independent numpy reference (tests/reference/diagnostics.py,
float64 numpy on whole arrays) and writes the same variables as `shearbox compute` with the
same chunking (one step x one layer x the grid) and compression (deflate level 1 + shuffle,
or none with --deflate 0). Prints the wall time in seconds.

Usage: numpy_compute.py INPUT OUTPUT [--deflate N]
"""

import argparse
import os
import sys
import time

import netCDF4
import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "..", "..", "tests", "reference"))
import diagnostics as ref  # noqa: E402

LAYER_VARS = [
    ("thermal_wind_u", lambda f: f["thermal_wind"][0]),
    ("thermal_wind_v", lambda f: f["thermal_wind"][1]),
    ("thickness", lambda f: f["thickness"]),
    ("layer_mean_temperature", lambda f: f["tbar"]),
    ("temperature_gradient", lambda f: f["gradient"]),
    ("baroclinic_torque", lambda f: f["baroclinic"]),
    ("balance_ratio", lambda f: f["ratio"]),
    ("thermal_advection", lambda f: f["advection"]),
    ("eady_growth_rate", lambda f: f["eady"]),
]


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("input")
    parser.add_argument("output")
    parser.add_argument("--deflate", type=int, default=1)
    args = parser.parse_args()
    start = time.perf_counter()
    with netCDF4.Dataset(args.input) as nc:
        tv = nc["time"]
        isos = [ref._format_time(d) for d in netCDF4.num2date(tv[:], tv.units, calendar=getattr(tv, "calendar", "standard"))]
    first = ref.load(args.input, isos[0], {})
    n_lat, n_lon, n_lev = len(first.lat), len(first.lon), len(first.p_hpa)
    comp = dict(zlib=args.deflate > 0, complevel=max(args.deflate, 1), shuffle=args.deflate > 0)
    with netCDF4.Dataset(args.output, "w", format="NETCDF4") as out:
        out.createDimension("time", None)
        out.createDimension("layer", n_lev - 1)
        out.createDimension("level", n_lev)
        out.createDimension("lat", n_lat)
        out.createDimension("lon", n_lon)
        out.createVariable("time", "f8", ("time",))
        out.createVariable("lat", "f8", ("lat",))[:] = first.lat
        out.createVariable("lon", "f8", ("lon",))[:] = first.lon
        out.createVariable("level", "f8", ("level",))[:] = first.p_hpa
        layer_vars = {
            name: out.createVariable(name, "f4", ("time", "layer", "lat", "lon"), chunksizes=(1, 1, n_lat, n_lon), **comp)
            for name, _ in LAYER_VARS
        }
        geo = {
            name: out.createVariable(name, "f4", ("time", "level", "lat", "lon"), chunksizes=(1, 1, n_lat, n_lon), **comp)
            for name in ("geostrophic_u", "geostrophic_v")
        }
        for t, iso in enumerate(isos):
            ds = ref.load(args.input, iso, {})
            masks = ref.horizontal_masks(ds)
            out["time"][t] = t
            for k in range(n_lev - 1):
                fields = ref.layer_fields(ds, masks, k, k + 1)
                for name, get in LAYER_VARS:
                    layer_vars[name][t, k, :, :] = np.asarray(get(fields), dtype=np.float32)
            for k in range(n_lev):
                ug, vg = ref.geostrophic_wind(ds, masks, k)
                geo["geostrophic_u"][t, k, :, :] = ug.astype(np.float32)
                geo["geostrophic_v"][t, k, :, :] = vg.astype(np.float32)
    print(f"{time.perf_counter() - start:.3f}")


if __name__ == "__main__":
    main()
