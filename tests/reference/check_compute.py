#!/usr/bin/env python3
"""Checks files written by `shearbox compute` with tools from outside the project.

For each fixture case: runs `shearbox compute`, then
1. runs the CF compliance checker (``cfchecks`` from the cfchecker package on PyPI, CF 1.8,
   offline against the CF tables in tests/reference/cf-tables) and requires zero errors;
2. reads the file back with netCDF4 (which bundles its own netCDF-C and HDF5) and compares
   every gridded diagnostic, cell by cell, with this folder's numpy reference
   (diagnostics.py: float64 throughout, no code shared with the Rust workspace);
3. reads files of both writers (`--writer direct`, the default, and `--writer library`) and
   requires every variable to be equal.

Tolerances: the Rust kernel stores inputs and outputs as float32, the reference keeps float64.
For each layer and variable we allow |rust - numpy| <= rel * max|numpy| + abs, where rel is
1e-4 for thickness and layer-mean temperature and 2e-3 for quantities built from horizontal
derivatives (a float32 height near 10 km has a spacing of 1e-3 m, which a centred difference of
weak-gradient layers turns into up to ~2e-3 relative, see tests/golden_profiles.rs). Winds get
abs = 5e-3 m/s: a thickness is a difference of two float32 heights (up to 2 x 5e-4 m of
rounding at 5-10 km), a centred difference of two thicknesses over two 2.5-degree cells
(556 km) turns that into up to 3.6e-9 of slope, and g0/f at the 5-degree edge of the
equatorial band (7.7e5 s) into 2.8e-3 m/s, plus the rounding of the float32 result. The
balance ratio and the Eady rate are proportional to |V_T|, so their tolerance per cell is
2e-3 relative plus 5e-3 m/s times their derivative with respect to |V_T|. Where a value is undefined must
match exactly. The largest error found for each variable is printed.

Usage: check_compute.py --shearbox BIN --tables DIR [--root DIR]
"""

from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile

import netCDF4
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import diagnostics as ref  # noqa: E402

# (fixture, --layers, overrides passed as --var)
CASES = [
    ("fixtures/tidy_nc4.nc", "adjacent", {}),
    ("fixtures/tidy_nc4.nc", "1000-500,850-300", {}),
    ("fixtures/packed_classic.nc", "adjacent", {}),
    ("fixtures/global_noleap.nc", "adjacent", {}),
    ("fixtures/antimeridian_360day.nc", "adjacent", {}),
    ("fixtures/permuted_julian.nc", "adjacent", {}),
    ("fixtures/temperature_only.nc", "adjacent", {}),
    ("fixtures/cyclic_duplicate.nc", "adjacent", {}),
    (
        "fixtures/short_names_allleap.nc",
        "adjacent",
        {"geopotential": "zg", "temperature": "ta", "u": "ua", "v": "va", "level": "lev"},
    ),
]

# Float32 noise of a derived wind at the edge of the equatorial band, m/s (see above).
WIND_ABS = 5e-3

# Output variable -> (key of ref.layer_fields, component index or None, rel, abs)
LAYER_VARS = {
    "thermal_wind_u": ("thermal_wind", 0, 2e-3, WIND_ABS),
    "thermal_wind_v": ("thermal_wind", 1, 2e-3, WIND_ABS),
    "thickness": ("thickness", None, 1e-4, 0.0),
    "layer_mean_temperature": ("tbar", None, 1e-4, 0.0),
    "temperature_gradient": ("gradient", None, 2e-3, 0.0),
    "baroclinic_torque": ("baroclinic", None, 2e-3, 0.0),
    "balance_ratio": ("ratio", None, 2e-3, 0.0),
    "thermal_advection": ("advection", None, 2e-3, 0.0),
    "eady_growth_rate": ("eady", None, 2e-3, 0.0),
}


def cf_errors(path, tables, py_bin):
    """Number of errors and warnings the CF checker reports, and its output."""
    cfchecks = os.path.join(py_bin, "cfchecks")
    out = subprocess.run(
        [
            cfchecks,
            "-v", "1.8",
            "-s", os.path.join(tables, "cf-standard-name-table-v83.xml"),
            "-a", os.path.join(tables, "cf-area-type-table.xml"),
            "-r", os.path.join(tables, "cf-standardized-region-list.xml"),
            path,
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    text = out.stdout + out.stderr
    errors = re.search(r"ERRORS detected: (\d+)", text)
    warnings = re.search(r"WARNINGS given: (\d+)", text)
    if errors is None:
        return None, None, text
    return int(errors.group(1)), int(warnings.group(1)) if warnings else None, text


def compare(name, var, got, want, rel, abs_tol, worst, per_cell=None):
    """Cell-by-cell comparison of one layer; returns a list of problems. `per_cell`, when
    given, is the derivative of the quantity with respect to |V_T| at each cell: the thermal
    wind's error, WIND_ABS, is carried through it into the tolerance."""
    problems = []
    got_nan, want_nan = np.isnan(got), np.isnan(want)
    if not np.array_equal(got_nan, want_nan):
        n = int(np.sum(got_nan != want_nan))
        problems.append(f"{name} {var}: undefined at {n} cells where the other is defined")
        return problems
    if np.all(want_nan):
        return problems
    scale = float(np.nanmax(np.abs(want)))
    diff = np.abs(got - want)
    err = float(np.nanmax(diff))
    if per_cell is not None:
        carried = WIND_ABS * np.abs(per_cell)
        limit = rel * np.abs(want) + carried + abs_tol
        with np.errstate(divide="ignore", invalid="ignore"):
            used = np.where(limit > 0, diff / limit, np.where(diff > 0, np.inf, 0.0))
        share = float(np.nanmax(used))
        worst[var] = max(worst.get(var, 0.0), share)
        if share > 1.0:
            over = int(np.nansum(used > 1.0))
            problems.append(f"{name} {var}: {over} cells beyond the propagated tolerance")
        return problems
    limit = rel * scale + abs_tol
    worst[var] = max(worst.get(var, 0.0), err / scale if scale > 0 else err)
    if err > limit:
        problems.append(f"{name} {var}: max |difference| {err:.3e} > {limit:.3e} (scale {scale:.3e})")
    return problems


def check_case(shearbox, root, fixture, layers, overrides, tables, py_bin, tmp, worst):
    name = f"{os.path.basename(fixture)} --layers {layers}"
    out = os.path.join(tmp, os.path.basename(fixture).replace(".nc", f"_{len(os.listdir(tmp))}.nc"))
    args = [shearbox, "compute", os.path.join(root, fixture), "-o", out, "-q", "--layers", layers]
    for role, var in overrides.items():
        args += ["--var", f"{role}={var}"]
    subprocess.run(args, check=True)
    problems = []

    errors, warnings, text = cf_errors(out, tables, py_bin)
    if errors is None:
        problems.append(f"{name}: the CF checker gave no verdict:\n{text[-2000:]}")
    elif errors != 0:
        problems.append(f"{name}: the CF checker found {errors} error(s):\n{text[-4000:]}")
    print(f"  {name}: CF checker: {errors} errors, {warnings} warnings")

    with netCDF4.Dataset(out) as nc:
        nc.set_auto_mask(True)
        times = netCDF4.num2date(nc["time"][:], nc["time"].units, calendar=nc["time"].calendar)
        isos = [ref._format_time(t) for t in times]
        bounds = np.asarray(nc["layer_bounds"][:])
        lat_out = np.asarray(nc["lat"][:])
        flip = lat_out[0] > lat_out[-1]
        for t, iso in enumerate(isos):
            ds = ref.load(os.path.join(root, fixture), iso, overrides)
            masks = ref.horizontal_masks(ds)
            want_lat = ds.lat[::-1] if flip else ds.lat
            if not np.array_equal(lat_out, want_lat):
                problems.append(f"{name}: latitudes differ from the input's")
            lon_out = np.asarray(nc["lon"][:])
            if not (np.all(np.diff(lon_out) > 0) and np.allclose(np.mod(lon_out - ds.lon + 180.0, 360.0), 180.0, atol=1e-9, rtol=0)):
                problems.append(f"{name}: longitudes are not the input's, increasing, modulo 360")
            levels = list(ds.p_hpa)
            for k, (pb, pt) in enumerate(bounds):
                kb, kt = levels.index(pb), levels.index(pt)
                fields = ref.layer_fields(ds, masks, kb, kt)
                for var, (key, comp, rel, abs_tol) in LAYER_VARS.items():
                    want = fields[key]
                    if want is None:
                        if var in nc.variables:
                            problems.append(f"{name}: {var} written but not defined by the inputs")
                        continue
                    if var not in nc.variables:
                        problems.append(f"{name}: {var} missing")
                        continue
                    if comp is not None:
                        want = want[comp]
                    got = np.ma.filled(nc[var][t, k, :, :].astype(np.float64), np.nan)
                    if flip:
                        got = got[::-1, :]
                    per_cell = None
                    with np.errstate(divide="ignore", invalid="ignore"):
                        # d(quantity)/d|V_T|: ratio = |f| |V_T| / (dZ B), Eady = 0.3098 |f| |V_T| / (dZ N).
                        if var == "balance_ratio":
                            per_cell = np.abs(masks.f) / (fields["thickness"] * fields["baroclinic"])
                        elif var == "eady_growth_rate":
                            per_cell = ref.EADY_FACTOR * np.abs(masks.f) / (fields["thickness"] * np.sqrt(fields["n2"]))
                    problems += compare(f"{name} {iso} layer {pb:g}-{pt:g}", var, got, want, rel, abs_tol, worst, per_cell)
            if "geopotential" in ds.fields:
                for k in range(len(levels)):
                    ug, vg = ref.geostrophic_wind(ds, masks, k)
                    for var, want in (("geostrophic_u", ug), ("geostrophic_v", vg)):
                        got = np.ma.filled(nc[var][t, k, :, :].astype(np.float64), np.nan)
                        if flip:
                            got = got[::-1, :]
                        problems += compare(f"{name} {iso} level {levels[k]:g}", var, got, want, 2e-3, WIND_ABS, worst)
            elif "geostrophic_u" in nc.variables:
                problems.append(f"{name}: geostrophic wind written without geopotential")
    return problems


def writers_agree(shearbox, root, tmp):
    """Files of the direct writer and of the netCDF library's, read by netCDF4 (its own
    netCDF-C and HDF5): every variable equal, masks included."""
    problems = []
    paths = {}
    for writer in ("direct", "library"):
        paths[writer] = os.path.join(tmp, f"writer_{writer}.nc")
        subprocess.run(
            [shearbox, "compute", os.path.join(root, "fixtures/global_noleap.nc"), "-o", paths[writer], "-q", "--writer", writer],
            check=True,
        )
    with netCDF4.Dataset(paths["direct"]) as a, netCDF4.Dataset(paths["library"]) as b:
        if set(a.variables) != set(b.variables):
            problems.append("the writers wrote different variables")
        for v in a.variables:
            x, y = a[v][:], b[v][:]
            if not np.array_equal(np.ma.getmaskarray(x), np.ma.getmaskarray(y)) or not np.array_equal(
                np.ma.filled(x, 0), np.ma.filled(y, 0)
            ):
                problems.append(f"variable {v} differs between the direct and the library writer")
    print(f"  direct and library writers: {len(problems)} differences read by netCDF4")
    return problems


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--shearbox", required=True)
    parser.add_argument("--tables", required=True)
    parser.add_argument("--root", default=ref.repo_root())
    args = parser.parse_args(argv)
    py_bin = os.path.dirname(sys.executable)
    worst = {}
    problems = []
    with tempfile.TemporaryDirectory() as tmp:
        for fixture, layers, overrides in CASES:
            problems += check_case(args.shearbox, args.root, fixture, layers, overrides, args.tables, py_bin, tmp, worst)
        problems += writers_agree(args.shearbox, args.root, tmp)
    for var in sorted(worst):
        if var in ("balance_ratio", "eady_growth_rate"):
            print(f"  largest difference from numpy, as a share of the propagated tolerance: {var} {worst[var]:.2f}")
        else:
            print(f"  largest difference from numpy, relative to the field's largest value: {var} {worst[var]:.2e}")
    if problems:
        for p in problems[:40]:
            print("FAIL " + p, file=sys.stderr)
        print(f"{len(problems)} problem(s)", file=sys.stderr)
        return 1
    print(f"compute output: CF-compliant and equal to the numpy reference on {len(CASES)} cases")
    return 0


if __name__ == "__main__":
    sys.exit(main())
