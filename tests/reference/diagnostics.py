#!/usr/bin/env python3
"""Reference implementation of the shearbox diagnostics, in numpy.

This program is the independent yardstick the Rust code is tested against. It shares no code
and no data structures with the Rust workspace: it reads a NetCDF file with the netCDF4
package (which bundles its own netCDF-C), recognises and normalises the variables with its
own rules, computes every diagnostic of /work/shared/physics.md ("the contract") as
vectorised float64 numpy on whole arrays, takes cos(latitude)-weighted box means and writes
one "profile document" (JSON) per case.

Design choices, and why:

* Whole arrays, NaN for missing. Every field is a float64 array with NaN where a value is
  missing or masked. A finite difference of two numbers touching a NaN is NaN, so the
  "missing at the cell or at a stencil neighbour" rule of the contract falls out of IEEE
  arithmetic; the centre cell, which a centred difference does not touch, is added to the
  stencil explicitly (``_with_centre``).
* Masks are applied as separate boolean arrays (pole rows, equatorial band, below ground), and
  the reason a layer's thermal wind is undefined is decided afterwards with the precedence
  below_ground, pole, equator, missing. Keeping the reasons apart from the NaNs is what lets
  the counts be reported.
* Unpacking and missing values are left to netCDF4's automatic mask-and-scale (it applies
  scale_factor/add_offset and masks _FillValue, missing_value and valid_range); the Rust
  reader does this itself, so the two meet only at the numbers.
* Deterministic output: keys sorted, floats written by Python's ``repr`` (shortest string that
  round-trips), a newline at the end.

Usage::

    python3 tests/reference/diagnostics.py --cases tests/reference/cases.json --out DIR

writes DIR/<case name>.json for every case of the cases file.
"""

from __future__ import annotations

import argparse
import datetime
import json
import math
import os
import sys
from dataclasses import dataclass, field

import cftime
import netCDF4
import numpy as np

# ---------------------------------------------------------------------------------------------
# Constants (physics.md, "Constants"; the source of each is named there and repeated here).
# ---------------------------------------------------------------------------------------------
G0 = 9.80665  # standard gravity, m s-2: CGPM 1901; U.S. Standard Atmosphere 1976
OMEGA = 7.292115e-5  # Earth rotation rate, rad s-1: IERS / WMO value
A_EARTH = 6371229.0  # sphere radius, m: WMO GRIB2 code table 3.2
R_D = 287.05  # gas constant of dry air, J kg-1 K-1: U.S. Standard Atmosphere 1976
C_PD = 1004.6  # heat capacity of dry air, J kg-1 K-1: common practice
KAPPA = R_D / C_PD  # Poisson exponent of potential temperature
VIRTUAL_FACTOR = 0.608  # T_v = T (1 + 0.608 q): common practice
P_REF_HPA = 1000.0  # reference pressure of potential temperature: common practice
EQUATOR_BAND_DEG = 5.0  # |phi| < 5 deg: balance quantities undefined (physics.md, masks)
GRADIENT_FLOOR = 1e-7  # K m-1: balance ratio undefined below this |grad T| (exact rules)
EADY_FACTOR = 0.3098  # Lindzen & Farrell 1980, J. Atmos. Sci.
DEG_TOL = 1e-9  # degrees: box edges and pole rows
SECONDS_PER_DAY = 86400.0

CAUTION = (
    "Diagnostic computed from model or reanalysis data; not an official forecast or warning. "
    "Defer to your national weather service's products and your own procedures."
)

ROLES = (
    "latitude",
    "longitude",
    "level",
    "time",
    "geopotential",
    "temperature",
    "u",
    "v",
    "humidity",
    "surface_pressure",
    "surface_geopotential",
)

# CF standard names (CF standard name table, v83 in /work/shared/data) of each role, then the
# short names seen in common practice when a file has no standard_name.
STANDARD_NAMES = {
    "latitude": ("latitude",),
    "longitude": ("longitude",),
    "level": ("air_pressure",),
    "time": ("time",),
    "geopotential": ("geopotential", "geopotential_height"),
    "temperature": ("air_temperature",),
    "u": ("eastward_wind",),
    "v": ("northward_wind",),
    "humidity": ("specific_humidity",),
    "surface_pressure": ("surface_air_pressure",),
    "surface_geopotential": ("surface_geopotential", "surface_altitude"),
}
SHORT_NAMES = {
    "latitude": ("lat", "latitude"),
    "longitude": ("lon", "longitude"),
    "level": ("level", "lev", "plev", "pressure", "isobaric"),
    "time": ("time",),
    "geopotential": ("z", "zg", "hgt", "gh", "phi", "geopotential"),
    "temperature": ("t", "ta", "air", "temp", "temperature"),
    "u": ("u", "ua", "uwnd"),
    "v": ("v", "va", "vwnd"),
    "humidity": ("q", "hus", "shum", "sphum"),
    "surface_pressure": ("sp", "ps", "psfc"),
    "surface_geopotential": ("zs", "phis", "orog", "sgp"),
}
# Roles that live on (time, level, lat, lon) and roles that live on (time, lat, lon).
LEVEL_FIELDS = ("geopotential", "temperature", "u", "v", "humidity")
SURFACE_FIELDS = ("surface_pressure", "surface_geopotential")

# UDUNITS spellings met in CF files (UDUNITS-2 unit database, from memory for the aliases).
PRESSURE_TO_HPA = {
    "pa": 0.01,
    "pascal": 0.01,
    "pascals": 0.01,
    "hpa": 1.0,
    "hectopascal": 1.0,
    "hectopascals": 1.0,
    "mbar": 1.0,
    "mb": 1.0,
    "millibar": 1.0,
    "millibars": 1.0,
    "kpa": 10.0,
}
GEOPOTENTIAL_UNITS = {"m2 s-2", "m2/s2", "m^2/s^2", "m**2 s**-2", "m2.s-2", "m^2 s^-2", "j kg-1", "j/kg"}
HEIGHT_UNITS = {"m", "gpm", "meter", "meters", "metre", "metres", "geopotential meters"}
KELVIN_UNITS = {"k", "kelvin", "degk", "deg_k", "degrees_k"}
CELSIUS_UNITS = {"degc", "deg_c", "celsius", "degrees_c", "degree_c", "c", "degree_celsius"}
WIND_UNITS = {"m s-1", "m/s", "m s**-1", "m.s-1", "m s^-1", "meter second-1", "m sec-1"}
HUMIDITY_TO_KG_PER_KG = {"kg kg-1": 1.0, "kg/kg": 1.0, "kg kg**-1": 1.0, "1": 1.0, "": 1.0,
                         "g kg-1": 1e-3, "g/kg": 1e-3}


class ReferenceInputError(Exception):
    """A case or a file the reference cannot use; the message says what to change."""


# ---------------------------------------------------------------------------------------------
# Reading and normalising
# ---------------------------------------------------------------------------------------------


def _attr(var, name, default=None):
    """A variable attribute as a Python value (strings stripped), or the default."""
    if name not in var.ncattrs():
        return default
    value = var.getncattr(name)
    if isinstance(value, str):
        return value.strip()
    return value


def _units(var):
    return str(_attr(var, "units", "")).strip().lower()


@dataclass
class Dataset:
    """A normalised snapshot at one time: levels bottom-up (hPa), lat S->N, lon increasing."""

    name: str
    time_iso: str
    lat: np.ndarray  # degrees, increasing
    lon: np.ndarray  # degrees, increasing (unwrapped; consecutive differences in (0, 360))
    periodic: bool
    p_hpa: np.ndarray  # decreasing (bottom-up)
    fields: dict = field(default_factory=dict)  # role -> (nlev, nlat, nlon) float64, NaN missing
    surface: dict = field(default_factory=dict)  # role -> (nlat, nlon) float64, NaN missing


def _find_coordinate(nc, role, overrides):
    """The coordinate variable of a role, by override, standard_name, axis/units, then name."""
    if role in overrides:
        name = overrides[role]
        if name not in nc.variables:
            raise ReferenceInputError(f"override {role}={name!r}: no such variable in the file")
        return nc.variables[name]
    coords = [v for n, v in nc.variables.items() if v.ndim == 1 and v.dimensions[0] == n]
    for var in coords:
        if _attr(var, "standard_name") in STANDARD_NAMES[role]:
            return var
    axis = {"latitude": "Y", "longitude": "X", "level": "Z", "time": "T"}[role]
    unit_test = {
        "latitude": lambda u: u in ("degrees_north", "degree_north", "degree_n", "degrees_n"),
        "longitude": lambda u: u in ("degrees_east", "degree_east", "degree_e", "degrees_e"),
        "level": lambda u: u in PRESSURE_TO_HPA,
        "time": lambda u: " since " in u,
    }[role]
    for var in coords:
        if str(_attr(var, "axis", "")).upper() == axis and (role != "level" or unit_test(_units(var))):
            return var
    for var in coords:
        if unit_test(_units(var)):
            return var
    for var in coords:
        if var.name.lower() in SHORT_NAMES[role]:
            return var
    raise ReferenceInputError(
        f"no {role} coordinate found; name it in the case's overrides as \"{role}\": \"<variable>\""
    )


def _find_field(nc, role, overrides, coord_dims, need_level):
    """A data variable of a role, or None when the file has none."""
    if role in overrides:
        name = overrides[role]
        if name not in nc.variables:
            raise ReferenceInputError(f"override {role}={name!r}: no such variable in the file")
        return nc.variables[name]

    def shaped(var):
        dims = set(var.dimensions)
        if not {coord_dims["latitude"], coord_dims["longitude"]} <= dims:
            return False
        return (coord_dims["level"] in dims) == need_level

    candidates = [v for n, v in nc.variables.items() if n not in nc.dimensions and shaped(v)]
    for var in candidates:
        if _attr(var, "standard_name") in STANDARD_NAMES[role]:
            return var
    for var in candidates:
        if var.name.lower() in SHORT_NAMES[role] and "standard_name" not in var.ncattrs():
            return var
    return None


def _longitude_order(lon_raw):
    """Indices that put longitudes in increasing order mod 360, without a duplicated column.

    Longitudes are reduced to [0, 360); a column equal (mod 360) to an earlier one is dropped
    (the cyclic duplicate, e.g. 0 and 360). The circle is then cut at the widest gap between
    neighbouring longitudes, so a regional grid that crosses the antimeridian or the Greenwich
    meridian comes out as one increasing run. Returns (indices, unwrapped longitudes, periodic).
    """
    reduced = np.mod(np.asarray(lon_raw, dtype=np.float64), 360.0)
    order = np.argsort(reduced, kind="stable")
    keep = []
    for idx in order:
        if keep and abs(reduced[idx] - reduced[keep[-1]]) < 1e-6:
            continue  # duplicated cyclic column
        keep.append(idx)
    if len(keep) > 1 and abs(reduced[keep[0]] + 360.0 - reduced[keep[-1]]) < 1e-6:
        keep.pop()  # e.g. 0 and 359.9999999
    keep = np.array(keep)
    vals = reduced[keep]
    n = len(vals)
    if n > 1:
        gaps = np.diff(np.concatenate([vals, [vals[0] + 360.0]]))
        # The widest gap follows element `cut`; a circle without a wider gap than the one
        # closing it (a global grid) keeps its smallest longitude first.
        cut = int(np.argmax(gaps))
        start = 0 if gaps[cut] - gaps[-1] <= 1e-6 else (cut + 1) % n
        keep = np.roll(keep, -start)
        vals = np.roll(vals, -start)
        vals = vals[0] + np.concatenate([[0.0], np.cumsum(np.mod(np.diff(vals), 360.0))])
        span = vals[-1] - vals[0]
        step = span / (n - 1)
        # physics.md "Grid": periodic when n * dlon is within half a spacing of 360 deg.
        periodic = abs(n * step - 360.0) <= 0.5 * step
    else:
        periodic = False
    return keep, vals, periodic


def _format_time(date):
    """ISO 8601 "YYYY-MM-DDTHH:MM:SSZ" of a cftime date, rounded to the nearest second."""
    micro = date.microsecond
    if micro:
        shift = 1_000_000 - micro if micro >= 500_000 else -micro
        date = date + datetime.timedelta(microseconds=shift)
    return (
        f"{date.year:04d}-{date.month:02d}-{date.day:02d}"
        f"T{date.hour:02d}:{date.minute:02d}:{date.second:02d}Z"
    )


def _as_float(data):
    """A netCDF4 (masked) array as float64 with NaN where masked."""
    arr = np.ma.asarray(data)
    return np.ma.filled(arr.astype(np.float64), np.nan)


def _read(var, dim_roles, time_index, want):
    """Read a variable and return it with axes in the order `want` (roles), time selected."""
    data = _as_float(var[...])
    axes = []
    for axis, dim in enumerate(var.dimensions):
        role = dim_roles.get(dim)
        if role is None:
            if data.shape[axis] != 1:
                raise ReferenceInputError(
                    f"variable {var.name!r} has an extra dimension {dim!r} of size "
                    f"{data.shape[axis]}; only size 1 is accepted"
                )
            role = f"extra:{dim}"
        axes.append(role)
    if "time" in axes:
        ti = axes.index("time")
        data = np.take(data, time_index, axis=ti)
        axes.pop(ti)
    for role in list(axes):
        if role.startswith("extra:"):
            i = axes.index(role)
            data = np.take(data, 0, axis=i)
            axes.pop(i)
    missing = [r for r in want if r not in axes]
    if missing:
        raise ReferenceInputError(f"variable {var.name!r} lacks the {missing} dimension(s)")
    return np.transpose(data, [axes.index(r) for r in want])


def load(path, time_request, overrides):
    """Read and normalise one file at one time; `time_request` is an ISO string or "latest"."""
    with netCDF4.Dataset(path) as nc:
        nc.set_auto_maskandscale(True)
        lat_v = _find_coordinate(nc, "latitude", overrides)
        lon_v = _find_coordinate(nc, "longitude", overrides)
        lev_v = _find_coordinate(nc, "level", overrides)
        time_v = _find_coordinate(nc, "time", overrides)
        coord_dims = {
            "latitude": lat_v.dimensions[0],
            "longitude": lon_v.dimensions[0],
            "level": lev_v.dimensions[0],
            "time": time_v.dimensions[0],
        }
        dim_roles = {
            coord_dims["latitude"]: "lat",
            coord_dims["longitude"]: "lon",
            coord_dims["level"]: "level",
            coord_dims["time"]: "time",
        }

        # Latitude S -> N.
        lat_raw = _as_float(lat_v[:])
        lat_order = np.argsort(lat_raw, kind="stable")
        lat = lat_raw[lat_order]
        if np.any(np.diff(lat) <= 0):
            raise ReferenceInputError("latitudes repeat; they must be strictly monotonic")

        # Longitude increasing mod 360, cyclic duplicate dropped.
        lon_order, lon, periodic = _longitude_order(_as_float(lon_v[:]))

        # Levels in hPa, bottom-up (decreasing pressure).
        unit = _units(lev_v)
        if unit not in PRESSURE_TO_HPA:
            raise ReferenceInputError(f"level units {unit!r} are not a pressure unit (Pa, hPa, mbar)")
        p_raw = _as_float(lev_v[:]) * PRESSURE_TO_HPA[unit]
        lev_order = np.argsort(-p_raw, kind="stable")
        p_hpa = p_raw[lev_order]

        # Time: CF units and calendar decoded with cftime; sorted; "latest" = last.
        calendar = str(_attr(time_v, "calendar", "standard")).lower()
        time_values = np.atleast_1d(_as_float(time_v[:]))
        if np.any(np.isnan(time_values)):
            raise ReferenceInputError("the time coordinate has missing values")
        dates = np.atleast_1d(
            cftime.num2date(
                time_values, _attr(time_v, "units"), calendar, only_use_cftime_datetimes=True
            )
        )
        time_order = [int(i) for i in np.argsort(time_values, kind="stable")]
        isos = [_format_time(dates[i]) for i in time_order]
        if time_request == "latest":
            time_index = time_order[-1]
            time_iso = isos[-1]
        else:
            if time_request not in isos:
                raise ReferenceInputError(
                    f"time {time_request!r} is not in the file; it has {isos}"
                )
            time_index = time_order[isos.index(time_request)]
            time_iso = time_request

        ds = Dataset(
            name=os.path.basename(path),
            time_iso=time_iso,
            lat=lat,
            lon=lon,
            periodic=periodic,
            p_hpa=p_hpa,
        )

        def reorder(arr):
            arr = np.take(arr, lat_order, axis=-2)
            return np.take(arr, lon_order, axis=-1)

        for role in LEVEL_FIELDS:
            var = _find_field(nc, role, overrides, coord_dims, need_level=True)
            if var is None:
                continue
            arr = _read(var, dim_roles, time_index, ("level", "lat", "lon"))
            arr = reorder(np.take(arr, lev_order, axis=0))
            ds.fields[role] = _convert(role, var, arr)
        for role in SURFACE_FIELDS:
            var = _find_field(nc, role, overrides, coord_dims, need_level=False)
            if var is None:
                continue
            arr = reorder(_read(var, dim_roles, time_index, ("lat", "lon")))
            ds.surface[role] = _convert(role, var, arr)
    if "geopotential" not in ds.fields and "temperature" not in ds.fields:
        raise ReferenceInputError("the file has neither geopotential nor temperature")
    return ds


def _convert(role, var, arr):
    """Convert a field to the working units: gpm, K, m s-1, kg kg-1, hPa."""
    unit = _units(var)
    if role in ("geopotential", "surface_geopotential"):
        if unit in GEOPOTENTIAL_UNITS:
            return arr / G0  # Z = Phi / g0 (physics.md, "Grid")
        if unit in HEIGHT_UNITS:
            return arr
        raise ReferenceInputError(f"{var.name}: units {unit!r} are neither m2 s-2 nor m/gpm")
    if role == "temperature":
        if unit in KELVIN_UNITS:
            return arr
        if unit in CELSIUS_UNITS:
            return arr + 273.15  # UDUNITS: degC = K - 273.15
        raise ReferenceInputError(f"{var.name}: temperature units {unit!r} are neither K nor degC")
    if role in ("u", "v"):
        if unit in WIND_UNITS:
            return arr
        raise ReferenceInputError(f"{var.name}: wind units {unit!r} are not m s-1")
    if role == "humidity":
        if unit in HUMIDITY_TO_KG_PER_KG:
            return arr * HUMIDITY_TO_KG_PER_KG[unit]
        raise ReferenceInputError(f"{var.name}: humidity units {unit!r} are not kg kg-1 or g kg-1")
    if role == "surface_pressure":
        if unit in PRESSURE_TO_HPA:
            return arr * PRESSURE_TO_HPA[unit]
        raise ReferenceInputError(f"{var.name}: surface pressure units {unit!r} are not Pa/hPa")
    raise AssertionError(role)


# ---------------------------------------------------------------------------------------------
# Derivatives on the sphere (physics.md, "Derivatives on the sphere"; exact rules)
# ---------------------------------------------------------------------------------------------


def _with_centre(deriv, field_):
    """A difference is also undefined where the centre value itself is missing."""
    return np.where(np.isnan(field_), np.nan, deriv)


def d_dphi(field_, lat_deg):
    """dF/dphi (per radian) along axis -2: centred inside, one-sided on the first/last row."""
    phi = np.deg2rad(lat_deg)
    out = np.full(field_.shape, np.nan)
    n = len(phi)
    if n < 2:
        return out
    if n > 2:
        out[..., 1:-1, :] = (field_[..., 2:, :] - field_[..., :-2, :]) / (phi[2:] - phi[:-2])[:, None]
    out[..., 0, :] = (field_[..., 1, :] - field_[..., 0, :]) / (phi[1] - phi[0])
    out[..., -1, :] = (field_[..., -1, :] - field_[..., -2, :]) / (phi[-1] - phi[-2])
    return _with_centre(out, field_)


def d_dlam(field_, lon_deg, periodic):
    """dF/dlambda (per radian) along axis -1: centred, wrapping when periodic, else one-sided
    at the two edge columns. Longitude differences are taken modulo 360 deg."""
    n = len(lon_deg)
    out = np.full(field_.shape, np.nan)
    if n < 2:
        return out
    if periodic:
        dlon = np.mod(np.roll(lon_deg, -1) - np.roll(lon_deg, 1), 360.0)
        out = (np.roll(field_, -1, axis=-1) - np.roll(field_, 1, axis=-1)) / np.deg2rad(dlon)
        return _with_centre(out, field_)
    if n > 2:
        dlon = np.mod(lon_deg[2:] - lon_deg[:-2], 360.0)
        out[..., 1:-1] = (field_[..., 2:] - field_[..., :-2]) / np.deg2rad(dlon)
    out[..., 0] = (field_[..., 1] - field_[..., 0]) / np.deg2rad(np.mod(lon_deg[1] - lon_deg[0], 360.0))
    out[..., -1] = (field_[..., -1] - field_[..., -2]) / np.deg2rad(
        np.mod(lon_deg[-1] - lon_deg[-2], 360.0)
    )
    return _with_centre(out, field_)


def gradient(field_, ds):
    """(dF/dx, dF/dy): dF/dx = dF/dlambda / (a cos phi), dF/dy = dF/dphi / a."""
    cosphi = np.cos(np.deg2rad(ds.lat))[:, None]
    ddx = d_dlam(field_, ds.lon, ds.periodic) / (A_EARTH * cosphi)
    ddy = d_dphi(field_, ds.lat) / A_EARTH
    return ddx, ddy


def joint(u, v):
    """A vector is defined where both components are."""
    bad = np.isnan(u) | np.isnan(v)
    return np.where(bad, np.nan, u), np.where(bad, np.nan, v)


# ---------------------------------------------------------------------------------------------
# Diagnostics
# ---------------------------------------------------------------------------------------------


@dataclass
class Masks:
    """Horizontal masks (nlat, nlon) shared by every level and layer."""

    pole: np.ndarray
    equator: np.ndarray
    f: np.ndarray  # Coriolis parameter, s-1, broadcast to (nlat, nlon)


def horizontal_masks(ds):
    shape = (len(ds.lat), len(ds.lon))
    lat2 = np.broadcast_to(ds.lat[:, None], shape)
    pole = np.abs(np.abs(lat2) - 90.0) <= DEG_TOL  # pole rows |phi| = 90
    equator = np.abs(lat2) < EQUATOR_BAND_DEG  # equatorial band |phi| < 5 deg
    f = 2.0 * OMEGA * np.sin(np.deg2rad(lat2))  # f = 2 Omega sin phi
    return Masks(pole=pole, equator=equator, f=f)


def below_ground(ds, k):
    """Cells where level k is below ground: p > surface pressure, or without surface pressure
    Z(level) < surface geopotential height. A comparison with a missing value is False."""
    if "surface_pressure" in ds.surface:
        with np.errstate(invalid="ignore"):
            return ds.p_hpa[k] > ds.surface["surface_pressure"]
    if "surface_geopotential" in ds.surface and "geopotential" in ds.fields:
        with np.errstate(invalid="ignore"):
            return ds.fields["geopotential"][k] < ds.surface["surface_geopotential"]
    return np.zeros((len(ds.lat), len(ds.lon)), dtype=bool)


def geostrophic_wind(ds, masks, k):
    """u_g = -(g0/f) dZ/dy, v_g = (g0/f) dZ/dx at level k (physics.md, "Quantities"), masked at
    pole rows, in the equatorial band, where Z or a stencil point is missing and below ground."""
    z = ds.fields["geopotential"][k]
    ddx, ddy = gradient(z, ds)
    with np.errstate(divide="ignore", invalid="ignore"):
        ug = -(G0 / masks.f) * ddy
        vg = (G0 / masks.f) * ddx
    bad = masks.pole | masks.equator | below_ground(ds, k)
    ug = np.where(bad, np.nan, ug)
    vg = np.where(bad, np.nan, vg)
    return joint(ug, vg)


def layer_mean_temperature(ds, kb, kt):
    """Trapezoid in ln p of T (virtual T = T (1 + 0.608 q) when humidity is present) over the
    levels kb..kt, divided by ln(p_b/p_t) (physics.md, "Layer-mean temperature")."""
    t = ds.fields["temperature"][kb : kt + 1]
    if "humidity" in ds.fields:
        t = t * (1.0 + VIRTUAL_FACTOR * ds.fields["humidity"][kb : kt + 1])
    p = ds.p_hpa[kb : kt + 1]
    dlnp = np.log(p[:-1] / p[1:])  # ln(p_k / p_k+1) > 0
    integral = np.sum(0.5 * (t[:-1] + t[1:]) * dlnp[:, None, None], axis=0)
    return integral / math.log(p[0] / p[-1])


def layer_fields(ds, masks, kb, kt):
    """Every per-cell layer quantity of the layer (levels kb bottom, kt top), as NaN-masked
    arrays, plus the mask reason counts' ingredients."""
    pb, pt = ds.p_hpa[kb], ds.p_hpa[kt]
    ln_ratio = math.log(pb / pt)
    has_z = "geopotential" in ds.fields
    has_t = "temperature" in ds.fields
    has_wind = "u" in ds.fields and "v" in ds.fields
    out = {}

    # Below ground: p_b > ps (or Z_b < surface height) at the cell: every quantity of the layer
    # is missing at that cell. The rule is about the cell itself, as for the geostrophic wind of
    # a level: a neighbour's (extrapolated) value still enters a stencil; only the result at a
    # below-ground cell is removed. That keeps V_T = V_g(top) - V_g(bottom) cell by cell.
    ground = below_ground(ds, kb)

    def cut(arr):
        return np.where(ground, np.nan, arr)

    # Thickness, geopotential method: Z_t - Z_b.
    dz_geo = ds.fields["geopotential"][kt] - ds.fields["geopotential"][kb] if has_z else None
    # Layer-mean temperature and the hypsometric thickness (R_d/g0) Tbar ln(p_b/p_t)
    # (hypsometric equation, U.S. Standard Atmosphere 1976).
    if has_t:
        tbar = layer_mean_temperature(ds, kb, kt)
        dz_temp = (R_D / G0) * tbar * ln_ratio
        kind = "virtual" if "humidity" in ds.fields else "dry"
    else:
        tbar = G0 * dz_geo / (R_D * ln_ratio)  # from the thickness, inverted hypsometric eq.
        dz_temp = None
        kind = "from_thickness"
    dz = dz_geo if has_z else dz_temp
    out["method"] = "geopotential" if has_z else "temperature"
    out["kind"] = kind
    out["thickness"] = cut(dz)
    out["thickness_temp"] = cut(dz_temp) if dz_temp is not None else None
    out["tbar"] = cut(tbar)

    # Thermal wind from the primary thickness: u_T = -(g0/f) d(dZ)/dy, v_T = (g0/f) d(dZ)/dx.
    ddx, ddy = gradient(dz, ds)
    with np.errstate(divide="ignore", invalid="ignore"):
        ut = -(G0 / masks.f) * ddy
        vt = (G0 / masks.f) * ddx
    balance_bad = masks.pole | masks.equator | ground
    ut, vt = joint(np.where(balance_bad, np.nan, ut), np.where(balance_bad, np.nan, vt))
    out["thermal_wind"] = (ut, vt)
    vt_speed = np.hypot(ut, vt)

    # Isobaric gradient of the layer-mean temperature: defined in the equatorial band, not on
    # pole rows.
    tx, ty = gradient(tbar, ds)
    deriv_bad = masks.pole | ground
    tx = np.where(deriv_bad, np.nan, tx)
    ty = np.where(deriv_bad, np.nan, ty)
    grad = np.hypot(tx, ty)
    out["gradient"] = grad

    # Baroclinic torque B = (g0/Tbar)|grad Tbar|; rotational torque C = |f||V_T|/dZ.
    with np.errstate(divide="ignore", invalid="ignore"):
        b_torque = (G0 / tbar) * grad
        c_torque = np.abs(masks.f) * vt_speed / dz
    out["baroclinic"] = b_torque
    out["rotational"] = c_torque

    # Balance ratio C/B: only with both geopotential and temperature; undefined where the
    # gradient is below 1e-7 K/m.
    if has_z and has_t:
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(grad < GRADIENT_FLOOR, np.nan, c_torque / b_torque)
        ratio = np.where(np.isnan(grad), np.nan, ratio)
        out["ratio"] = ratio
    else:
        out["ratio"] = None

    # Geostrophic winds at the bottom and top levels (needed for advection and turning).
    if has_z:
        ugb, vgb = geostrophic_wind(ds, masks, kb)
        ugt, vgt = geostrophic_wind(ds, masks, kt)
        ubar = 0.5 * (ugb + ugt)
        vbar = 0.5 * (vgb + vgt)
        # Thermal advection A = -(ubar dTbar/dx + vbar dTbar/dy), K s-1 (physics.md).
        adv = -(ubar * tx + vbar * ty)
        out["advection"] = cut(np.where(masks.equator | masks.pole, np.nan, adv))
    else:
        out["advection"] = None

    # Static stability from potential temperature theta = T (p_ref/p)^kappa, actual T
    # (Poisson's equation; physics.md "Static stability").
    if has_t:
        theta_b = ds.fields["temperature"][kb] * (P_REF_HPA / pb) ** KAPPA
        theta_t = ds.fields["temperature"][kt] * (P_REF_HPA / pt) ** KAPPA
        theta_mean = 0.5 * (theta_b + theta_t)
        with np.errstate(divide="ignore", invalid="ignore"):
            n2 = cut((G0 / theta_mean) * (theta_t - theta_b) / dz)
        out["n2"] = n2
        # Eady growth rate sigma = 0.3098 |f| (|V_T|/dZ) / N, undefined where N^2 <= 0
        # (Lindzen & Farrell 1980).
        with np.errstate(divide="ignore", invalid="ignore"):
            n = np.sqrt(np.where(n2 > 0, n2, np.nan))
            eady = EADY_FACTOR * np.abs(masks.f) * (vt_speed / dz) / n
        out["eady"] = eady
    else:
        out["n2"] = None
        out["eady"] = None

    # Observed and ageostrophic shear.
    if has_wind:
        su = ds.fields["u"][kt] - ds.fields["u"][kb]
        sv = ds.fields["v"][kt] - ds.fields["v"][kb]
        su, sv = joint(cut(su), cut(sv))
        out["observed_shear"] = (su, sv)
        out["ageostrophic_shear"] = joint(su - ut, sv - vt)
    else:
        out["observed_shear"] = None
        out["ageostrophic_shear"] = None

    # Why the thermal wind is undefined at a cell: below_ground, pole, equator, missing.
    defined = ~np.isnan(ut)
    reason = np.full(ut.shape, "valid", dtype=object)
    undefined = ~defined
    reason[undefined] = "missing"
    reason[undefined & masks.equator] = "equator"
    reason[undefined & masks.pole] = "pole"
    reason[undefined & ground] = "below_ground"
    out["reason"] = reason

    if has_z:
        out["geostrophic_bottom"] = (ugb, vgb)
        out["geostrophic_top"] = (ugt, vgt)
    return out


# ---------------------------------------------------------------------------------------------
# Box and box means
# ---------------------------------------------------------------------------------------------


def box_mask(ds, bbox):
    """Cells whose centre lies in the box [W, S, E, N] (edges included, 1e-9 deg); W > E crosses
    the antimeridian; longitudes compared modulo 360 (GeoJSON bbox order, RFC 7946 sec. 5)."""
    west, south, east, north = (float(x) for x in bbox)
    lat_in = (ds.lat >= south - DEG_TOL) & (ds.lat <= north + DEG_TOL)
    if west <= east:
        width = east - west
    else:
        width = east - west + 360.0
    if width >= 360.0 - DEG_TOL:
        lon_in = np.ones(len(ds.lon), dtype=bool)
    else:
        offset = np.mod(ds.lon - west, 360.0)
        lon_in = (offset <= width + DEG_TOL) | (offset >= 360.0 - DEG_TOL)
    return lat_in[:, None] & lon_in[None, :]


def box_mean(q, weights, inbox):
    """Sum(w q)/Sum(w) over box cells where q is defined, w = cos(phi); None when none is."""
    if q is None:
        return None
    sel = inbox & ~np.isnan(q)
    if not sel.any():
        return None
    # "+ 0.0" turns a negative zero into a positive one, so an exactly zero mean is written
    # as 0.0 whatever the signs of the zero terms were.
    return float(np.sum(weights[sel] * q[sel]) / np.sum(weights[sel])) + 0.0


def vector(u, v, weights, inbox):
    """Box-mean vector by component; speed and direction of the mean vector. Direction: the
    wind convention, degrees clockwise from north of where the vector comes from
    (WMO-No. 8, CIMO Guide; from memory), = atan2(-u, -v) mod 360."""
    if u is None:
        return None
    u, v = joint(u, v)
    mu = box_mean(u, weights, inbox)
    mv = box_mean(v, weights, inbox)
    if mu is None or mv is None:
        return None
    direction = math.degrees(math.atan2(-mu, -mv)) % 360.0
    if direction >= 360.0:
        direction = 0.0
    return {
        "u_ms": mu,
        "v_ms": mv,
        "speed_ms": math.hypot(mu, mv),
        "direction_deg": direction,
    }


def scaled(value, factor):
    return None if value is None else value * factor


def turning(bottom, top):
    """s = u_b v_t - v_b u_t of the box-mean geostrophic winds: s < 0 veering (clockwise with
    height), s > 0 backing (physics.md, "Turning")."""
    if bottom is None or top is None:
        return None
    s = bottom["u_ms"] * top["v_ms"] - bottom["v_ms"] * top["u_ms"]
    if s < 0:
        return "veering"
    if s > 0:
        return "backing"
    return "none"


# ---------------------------------------------------------------------------------------------
# The profile document
# ---------------------------------------------------------------------------------------------


def _level_index(ds, p):
    hits = np.nonzero(np.abs(ds.p_hpa - float(p)) <= 1e-6)[0]
    if len(hits) != 1:
        raise ReferenceInputError(
            f"layer level {p} hPa is not a level of the file; levels are {ds.p_hpa.tolist()}"
        )
    return int(hits[0])


def profile(ds, bbox, layer):
    """The profile document of one box at the snapshot `ds`."""
    masks = horizontal_masks(ds)
    inbox = box_mask(ds, bbox)
    if not inbox.any():
        raise ReferenceInputError(f"the box {bbox} contains no grid cell centre")
    weights = np.broadcast_to(np.cos(np.deg2rad(ds.lat))[:, None], inbox.shape)
    has_z = "geopotential" in ds.fields
    has_wind = "u" in ds.fields and "v" in ds.fields

    def level_of(role, k):
        return ds.fields[role][k] if role in ds.fields else None

    levels = []
    geo_means = []
    for k, p in enumerate(ds.p_hpa):
        if has_z:
            ug, vg = geostrophic_wind(ds, masks, k)
            geo = vector(ug, vg, weights, inbox)
            valid = int(np.sum(inbox & ~np.isnan(ug)))
        else:
            geo = None
            valid = 0
        geo_means.append(geo)
        levels.append(
            {
                "pressure_hpa": float(p),
                "geopotential_height_m": box_mean(level_of("geopotential", k), weights, inbox),
                "temperature_k": box_mean(level_of("temperature", k), weights, inbox),
                "geostrophic_wind": geo,
                "wind": vector(ds.fields["u"][k], ds.fields["v"][k], weights, inbox)
                if has_wind
                else None,
                "valid_cells": valid,
            }
        )

    if layer is None:
        pairs = [(k, k + 1) for k in range(len(ds.p_hpa) - 1)]
    else:
        bottom, top = layer
        if not float(bottom) > float(top):
            raise ReferenceInputError(f"layer {layer}: bottom pressure must exceed top pressure")
        pairs = [(_level_index(ds, bottom), _level_index(ds, top))]

    layers = []
    for kb, kt in pairs:
        lf = layer_fields(ds, masks, kb, kt)
        reason = lf["reason"][inbox]
        counts = {r: int(np.sum(reason == r)) for r in ("equator", "pole", "missing", "below_ground")}
        ut, vt = lf["thermal_wind"]
        layers.append(
            {
                "bottom_hpa": float(ds.p_hpa[kb]),
                "top_hpa": float(ds.p_hpa[kt]),
                "thickness_m": box_mean(lf["thickness"], weights, inbox),
                "thickness_method": lf["method"],
                "thickness_from_temperature_m": box_mean(lf["thickness_temp"], weights, inbox),
                "mean_temperature_k": box_mean(lf["tbar"], weights, inbox),
                "mean_temperature_kind": lf["kind"],
                "thermal_wind": vector(ut, vt, weights, inbox),
                "temperature_gradient_k_per_100km": scaled(box_mean(lf["gradient"], weights, inbox), 1e5),
                "baroclinic_torque_s2": box_mean(lf["baroclinic"], weights, inbox),
                "rotational_torque_s2": box_mean(lf["rotational"], weights, inbox),
                "balance_ratio": box_mean(lf["ratio"], weights, inbox),
                "thermal_advection_k_per_day": scaled(
                    box_mean(lf["advection"], weights, inbox), SECONDS_PER_DAY
                ),
                "turning": turning(geo_means[kb], geo_means[kt]) if has_z else None,
                "n_squared_s2": box_mean(lf["n2"], weights, inbox),
                "eady_growth_rate_per_day": scaled(box_mean(lf["eady"], weights, inbox), SECONDS_PER_DAY),
                "observed_shear": vector(*lf["observed_shear"], weights, inbox)
                if lf["observed_shear"] is not None
                else None,
                "ageostrophic_shear": vector(*lf["ageostrophic_shear"], weights, inbox)
                if lf["ageostrophic_shear"] is not None
                else None,
                "valid_cells": int(np.sum(reason == "valid")),
                "masked": counts,
            }
        )

    return {
        "dataset": ds.name,
        "time": ds.time_iso,
        "bbox": [float(x) for x in bbox],
        "caution": CAUTION,
        "levels": levels,
        "layers": layers,
    }


def render(doc):
    """Deterministic JSON text: sorted keys, repr floats, no NaN, newline at the end."""
    return json.dumps(doc, sort_keys=True, indent=2, allow_nan=False) + "\n"


def repo_root():
    return os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def run_case(case, root):
    """The profile document of one case of the cases file."""
    overrides = case.get("overrides") or {}
    unknown = set(overrides) - set(ROLES)
    if unknown:
        raise ReferenceInputError(f"case {case['name']}: unknown override roles {sorted(unknown)}")
    path = os.path.join(root, case["fixture"])
    ds = load(path, case.get("time", "latest"), overrides)
    return profile(ds, case["bbox"], case.get("layer"))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--cases", required=True, help="JSON list of cases")
    parser.add_argument("--out", required=True, help="directory for <name>.json")
    parser.add_argument("--root", default=repo_root(), help="directory fixture paths are relative to")
    args = parser.parse_args(argv)
    with open(args.cases, encoding="utf-8") as fh:
        cases = json.load(fh)
    names = [c["name"] for c in cases]
    if len(set(names)) != len(names):
        print("error: case names repeat in the cases file", file=sys.stderr)
        return 2
    os.makedirs(args.out, exist_ok=True)
    for case in cases:
        try:
            doc = run_case(case, args.root)
        except (ReferenceInputError, OSError) as err:
            print(f"error: case {case.get('name')!r}: {err}", file=sys.stderr)
            return 1
        with open(os.path.join(args.out, f"{case['name']}.json"), "w", encoding="utf-8", newline="\n") as fh:
            fh.write(render(doc))
    return 0


if __name__ == "__main__":
    sys.exit(main())
