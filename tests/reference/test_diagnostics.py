"""Checks of the numpy reference against analytic cases and stated conventions.

Run with ``python3 -m unittest discover -s tests/reference`` (check_goldens.sh runs them).
Each test builds small NetCDF files with netCDF4 in a temporary directory, so nothing here
depends on the project's fixtures or on the Rust code. The source of every expected value is
named beside its check.
"""

from __future__ import annotations

import datetime
import json
import math
import os
import sys
import tempfile
import unittest

import netCDF4
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import diagnostics as ref  # noqa: E402

LEVELS = np.array([1000.0, 850.0, 700.0, 500.0, 300.0])


def hydrostatic_heights(z_bottom, temperature, p_hpa, humidity=None):
    """Z at every level from the bottom level up with the trapezoid of virtual temperature in
    ln p (hypsometric equation, U.S. Standard Atmosphere 1976)."""
    tv = temperature if humidity is None else temperature * (1.0 + 0.608 * humidity)
    z = np.empty_like(temperature)
    z[0] = z_bottom
    for k in range(1, len(p_hpa)):
        z[k] = z[k - 1] + (ref.R_D / ref.G0) * 0.5 * (tv[k - 1] + tv[k]) * math.log(p_hpa[k - 1] / p_hpa[k])
    return z


def write(path, lat, lon, p_hpa, fields, *, fmt="NETCDF4", level_units="hPa", level_scale=1.0,
          time_units="hours since 2026-01-14 00:00:00", calendar="standard", times=(0.0,),
          dims=("time", "level", "lat", "lon"), surface=None, packed=None, fill_cells=None):
    """Write (level, lat, lon) fields (dict name -> (array, units, standard_name)) repeated
    over `times`. `packed` names fields to store as int16 with scale/offset; `fill_cells`
    maps a field name to a list of (k, j, i) cells written as the fill value."""
    packed = packed or ()
    fill_cells = fill_cells or {}
    with netCDF4.Dataset(path, "w", format=fmt) as nc:
        nc.createDimension("time", len(times))
        nc.createDimension("level", len(p_hpa))
        nc.createDimension("lat", len(lat))
        nc.createDimension("lon", len(lon))
        tv = nc.createVariable("time", "f8", ("time",))
        tv.units = time_units
        tv.calendar = calendar
        tv.standard_name = "time"
        tv[:] = np.asarray(times)
        lv = nc.createVariable("level", "f8", ("level",))
        lv.units = level_units
        lv.standard_name = "air_pressure"
        lv[:] = np.asarray(p_hpa) * level_scale
        la = nc.createVariable("lat", "f8", ("lat",))
        la.units = "degrees_north"
        la.standard_name = "latitude"
        la[:] = lat
        lo = nc.createVariable("lon", "f8", ("lon",))
        lo.units = "degrees_east"
        lo.standard_name = "longitude"
        lo[:] = lon
        order = [("time", "level", "lat", "lon").index(d) for d in dims]
        for name, (arr, units, std) in fields.items():
            full = np.broadcast_to(arr, (len(times),) + arr.shape).copy()
            for (k, j, i) in fill_cells.get(name, ()):
                full[:, k, j, i] = np.nan
            if name in packed:
                lo_v, hi_v = np.nanmin(full), np.nanmax(full)
                scale = (hi_v - lo_v) / 60000.0 if hi_v > lo_v else 1.0
                offset = 0.5 * (hi_v + lo_v)
                var = nc.createVariable(name, "i2", dims, fill_value=np.int16(-32767))
                var.missing_value = np.int16(-32768)
                var.scale_factor = scale
                var.add_offset = offset
            else:
                var = nc.createVariable(name, "f8", dims, fill_value=-9999.0)
            var.units = units
            if std:
                var.standard_name = std
            data = np.transpose(full, order)
            var[...] = np.ma.array(np.nan_to_num(data), mask=np.isnan(data))
        for name, (arr, units, std) in (surface or {}).items():
            var = nc.createVariable(name, "f8", ("lat", "lon"))
            var.units = units
            var.standard_name = std
            var[...] = arr


def baroclinic_fields(lat, lon, *, south_cold=False, meridional_flow=0.0):
    """A dry atmosphere with a temperature decreasing poleward linearly in latitude and a
    bottom-level height field whose zonal slope gives a meridional geostrophic wind."""
    sign = -1.0 if south_cold else 1.0
    lat2, lon2 = np.meshgrid(lat, lon, indexing="ij")
    t0 = 288.0 - 6.5e-3 * 0.0
    temps = []
    for p in LEVELS:
        base = t0 * (p / 1000.0) ** 0.19  # a standard-atmosphere-like profile
        temps.append(base - sign * 0.5 * (lat2 - 45.0 * sign) * (p / 1000.0))
    temperature = np.array(temps)
    z_bottom = 100.0 + meridional_flow * lon2
    z = hydrostatic_heights(z_bottom, temperature, LEVELS)
    return z, temperature


class Conventions(unittest.TestCase):
    def test_wind_direction_convention(self):
        # WMO wind direction: clockwise from true north, the direction the wind comes FROM
        # (WMO-No. 8, CIMO Guide; from memory).
        weights = np.ones((1, 1))
        inbox = np.ones((1, 1), dtype=bool)
        cases = {(10.0, 0.0): 270.0, (-10.0, 0.0): 90.0, (0.0, 10.0): 180.0, (0.0, -10.0): 0.0,
                 (5.0, 5.0): 225.0}
        for (u, v), expected in cases.items():
            vec = ref.vector(np.full((1, 1), u), np.full((1, 1), v), weights, inbox)
            self.assertAlmostEqual(vec["direction_deg"], expected, places=12, msg=(u, v))
            self.assertAlmostEqual(vec["speed_ms"], math.hypot(u, v), places=12)

    def test_render_is_deterministic_and_refuses_nan(self):
        doc = {"b": 0.1 + 0.2, "a": [1.0, None]}
        text = ref.render(doc)
        self.assertEqual(text, ref.render(doc))
        self.assertTrue(text.endswith("}\n"))
        self.assertLess(text.index('"a"'), text.index('"b"'))
        self.assertIn("0.30000000000000004", text)  # Python repr of the float (round trip)
        with self.assertRaises(ValueError):
            ref.render({"x": float("nan")})


class Calendars(unittest.TestCase):
    def time_iso(self, units, calendar, value):
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "cal.nc")
            lat = np.array([40.0, 42.5, 45.0])
            lon = np.array([0.0, 2.5, 5.0])
            t = np.full((2, 3, 3), 250.0)
            write(path, lat, lon, LEVELS[:2], {"t": (t, "K", "air_temperature")},
                  time_units=units, calendar=calendar, times=(value,))
            return ref.load(path, "latest", {}).time_iso

    def test_calendars(self):
        # 1e6 hours after 1900-01-01 = 41666 days + 16 h.
        # standard: proleptic Gregorian arithmetic of Python's datetime (ISO 8601).
        expected = (datetime.datetime(1900, 1, 1) + datetime.timedelta(hours=1e6)).strftime(
            "%Y-%m-%dT%H:%M:%SZ")
        self.assertEqual(self.time_iso("hours since 1900-01-01", "standard", 1e6), expected)
        # 360_day (CF conventions 4.4.1): 41666 = 115*360 + 266 days; 266 = 8*30 + 26
        # -> year 2015, month 9, day 27.
        self.assertEqual(self.time_iso("hours since 1900-01-01", "360_day", 1e6), "2015-09-27T16:00:00Z")
        # noleap (CF 4.4.1): 41666 = 114*365 + 56 days -> 2014, day-of-year 57 = Feb 26.
        self.assertEqual(self.time_iso("hours since 1900-01-01", "noleap", 1e6), "2014-02-26T16:00:00Z")
        # noleap: day 59 after 2000-01-01 is Mar 1 (31 + 28 days), there is no Feb 29.
        self.assertEqual(self.time_iso("days since 2000-01-01", "noleap", 59.0), "2000-03-01T00:00:00Z")


class Balance(unittest.TestCase):
    def test_solid_body_geostrophic_wind(self):
        # Analytic case: Z = Z0 - (a Omega U / g0) sin^2(phi) is in geostrophic balance with the
        # zonal flow u = U cos(phi), v = 0 (the geostrophic part of the solid-body test of
        # Williamson et al. 1992, J. Comput. Phys. 102; from memory). The centred difference of
        # sin^2 over +-d is sin(2 phi) sin(2 d)/(2 d) exactly, so the discrete answer is
        # U cos(phi) sin(2d)/(2d).
        lat = np.arange(-85.0, 85.1, 5.0)
        lon = np.arange(0.0, 360.0, 5.0)
        u0 = 20.0
        lat2 = np.broadcast_to(lat[:, None], (len(lat), len(lon)))
        zlev = np.array([100.0 + 0.0 * lat2, 5500.0 - (ref.A_EARTH * ref.OMEGA * u0 / ref.G0)
                         * np.sin(np.deg2rad(lat2)) ** 2])
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "solid.nc")
            write(path, lat, lon, LEVELS[[0, 3]], {"zg": (zlev, "m", "geopotential_height")})
            ds = ref.load(path, "latest", {})
        self.assertTrue(ds.periodic)
        masks = ref.horizontal_masks(ds)
        ug, vg = ref.geostrophic_wind(ds, masks, 1)
        d = math.radians(5.0)
        expected = u0 * np.cos(np.deg2rad(lat)) * math.sin(2 * d) / (2 * d)
        rows = (np.abs(lat) >= 5.0) & (np.abs(lat) < 85.0)
        np.testing.assert_allclose(ug[rows], np.broadcast_to(expected[rows, None], ug[rows].shape),
                                   rtol=1e-9)
        np.testing.assert_array_equal(vg[rows], 0.0)
        self.assertTrue(np.all(np.isnan(ug[np.abs(lat) < 5.0])))  # equatorial band
        doc = ref.profile(ds, [170.0, 40.0, -170.0, 50.0], None)  # crosses the antimeridian
        geo = doc["levels"][1]["geostrophic_wind"]
        self.assertAlmostEqual(geo["direction_deg"], 270.0, places=9)  # a westerly
        self.assertEqual(doc["levels"][1]["valid_cells"], 3 * 5)  # 40,45,50 x 170..190

    def test_isothermal_thickness_and_stability(self):
        # Isothermal layer: the hypsometric thickness is (R_d T/g0) ln(p_b/p_t) exactly
        # (U.S. Standard Atmosphere 1976), and N^2 tends to g^2/(c_p T) (textbook result for an
        # isothermal atmosphere, from memory); the finite-layer form differs by under 2 %.
        lat = np.arange(30.0, 60.1, 2.5)
        lon = np.arange(-20.0, 20.1, 2.5)
        t = np.full((len(LEVELS), len(lat), len(lon)), 250.0)
        z = hydrostatic_heights(np.full(t.shape[1:], 50.0), t, LEVELS)
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "iso.nc")
            write(path, lat, lon, LEVELS, {"z": (z * ref.G0, "m2 s-2", "geopotential"),
                                           "t": (t, "K", "air_temperature")})
            doc = ref.profile(ref.load(path, "latest", {}), [-10.0, 40.0, 10.0, 50.0], [1000, 500])
        layer = doc["layers"][0]
        expected = ref.R_D * 250.0 / ref.G0 * math.log(2.0)
        self.assertAlmostEqual(layer["thickness_from_temperature_m"], expected, delta=1e-9)
        self.assertAlmostEqual(layer["thickness_m"], expected, delta=1e-6)
        self.assertEqual(layer["thickness_method"], "geopotential")
        self.assertEqual(layer["mean_temperature_kind"], "dry")
        self.assertAlmostEqual(layer["mean_temperature_k"], 250.0, places=9)
        n2_analytic = ref.G0 ** 2 / (ref.C_PD * 250.0)
        self.assertLess(abs(layer["n_squared_s2"] / n2_analytic - 1.0), 0.02)
        self.assertIsNone(layer["balance_ratio"])  # no gradient: ratio undefined
        self.assertAlmostEqual(layer["thermal_wind"]["speed_ms"], 0.0, delta=1e-9)

    def check_baroclinic(self, south):
        lat = np.arange(-70.0, -19.9, 2.5) if south else np.arange(20.0, 70.1, 2.5)
        lon = np.arange(-30.0, 30.1, 2.5)
        z, t = baroclinic_fields(lat, lon, south_cold=south, meridional_flow=20.0)
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "baro.nc")
            write(path, lat, lon, LEVELS, {"z": (z, "m", "geopotential_height"),
                                           "t": (t, "K", "air_temperature")})
            ds = ref.load(path, "latest", {})
        box = [-10.0, -55.0, 10.0, -40.0] if south else [-10.0, 40.0, 10.0, 55.0]
        doc = ref.profile(ds, box, None)
        masks = ref.horizontal_masks(ds)
        for k, layer in enumerate(doc["layers"]):
            # Thermal wind of the geopotential thickness equals V_g(top) - V_g(bottom) with the
            # same stencil (physics.md, "Thermal wind of a layer": the built-in check).
            lf = ref.layer_fields(ds, masks, k, k + 1)
            ub, vb = lf["geostrophic_bottom"]
            ut_, vt_ = lf["geostrophic_top"]
            np.testing.assert_allclose(lf["thermal_wind"][0], ut_ - ub, rtol=1e-9, atol=1e-9)
            np.testing.assert_allclose(lf["thermal_wind"][1], vt_ - vb, rtol=1e-9, atol=1e-9)
            # Heights built hydrostatically from the same temperatures: rotational and
            # baroclinic torques agree (thermal-wind balance), ratio 1 to rounding.
            self.assertAlmostEqual(layer["balance_ratio"], 1.0, delta=1e-9)
            # Cold air poleward: the thermal wind is a westerly in both hemispheres (thermal
            # wind blows with cold air on its left in the NH, on its right in the SH; common
            # practice).
            self.assertGreater(layer["thermal_wind"]["u_ms"], 0.0)
            # Flow from the warm side (equatorward) gives warm advection, and the wind turns
            # with height: veering in the NH, backing in the SH (common practice; physics.md
            # s = -(R_d ln(p_b/p_t)/f) A).
            self.assertGreater(layer["thermal_advection_k_per_day"], 0.0)
            self.assertEqual(layer["turning"], "backing" if south else "veering")
            self.assertEqual(layer["valid_cells"], 9 * 7)
        return doc

    def test_baroclinic_north(self):
        self.check_baroclinic(south=False)

    def test_baroclinic_south(self):
        self.check_baroclinic(south=True)


class Normalisation(unittest.TestCase):
    def test_layout_does_not_change_the_document(self):
        # The same atmosphere written in two layouts: S->N vs N->S latitudes, longitudes
        # 0..355 vs -180..175 plus a duplicated 360 column, hPa vs Pa stored top first,
        # K vs degC, height vs geopotential, (time, level, lat, lon) vs (lon, lat, level, time).
        # The documents must agree (CF conventions 1.8: these are all
        # equivalent encodings of one field).
        lat = np.arange(-60.0, 60.1, 5.0)
        lon = np.arange(0.0, 360.0, 5.0)
        z, t = baroclinic_fields(lat, lon, meridional_flow=5.0)
        q = np.clip(0.01 * (LEVELS[:, None, None] / 1000.0) ** 3 + 0.0 * t, 0, None)
        u = 10.0 + 0.0 * t
        v = -3.0 + 0.0 * t
        with tempfile.TemporaryDirectory() as tmp:
            a = os.path.join(tmp, "a.nc")
            write(a, lat, lon, LEVELS, {"zg": (z, "m", "geopotential_height"),
                                        "ta": (t, "K", "air_temperature"),
                                        "hus": (q, "kg kg-1", "specific_humidity"),
                                        "ua": (u, "m s-1", "eastward_wind"),
                                        "va": (v, "m s-1", "northward_wind")})
            b = os.path.join(tmp, "b.nc")
            lat_b = lat[::-1]
            lon_b = np.concatenate([np.arange(-180.0, 180.0, 5.0), [180.0]])
            src = np.mod(lon_b, 360.0) / 5.0
            cols = np.round(src).astype(int) % len(lon)
            rev = LEVELS[::-1]

            def relayout(arr):
                return arr[::-1][:, ::-1][:, :, cols]

            write(b, lat_b, lon_b, rev, {
                "hgt_field": (relayout(z * ref.G0), "m2 s-2", "geopotential"),
                "air_temp_c": (relayout(t - 273.15), "degC", "air_temperature"),
                "hus": (relayout(q), "kg kg-1", "specific_humidity"),
                "zonal": (relayout(u), "m s-1", "eastward_wind"),
                "merid": (relayout(v), "m s-1", "northward_wind")},
                fmt="NETCDF3_CLASSIC", level_units="Pa", level_scale=100.0,
                dims=("lon", "lat", "level", "time"), time_units="minutes since 2026-01-14",
                calendar="gregorian")
            for box, layer in (([170.0, 30.0, -170.0, 50.0], None), ([-5.0, 10.0, 5.0, 20.0], [1000, 300])):
                doc_a = ref.profile(ref.load(a, "2026-01-14T00:00:00Z", {}), box, layer)
                doc_b = ref.profile(ref.load(b, "latest", {}), box, layer)
                self.assertEqual(doc_b["time"], "2026-01-14T00:00:00Z")
                self.assertEqual(doc_a["levels"][0]["pressure_hpa"], 1000.0)
                doc_b["dataset"] = doc_a["dataset"]
                self.assert_docs_close(doc_a, doc_b)

    def assert_docs_close(self, a, b, path="doc"):
        if isinstance(a, dict):
            self.assertEqual(sorted(a), sorted(b), path)
            for key in a:
                self.assert_docs_close(a[key], b[key], f"{path}.{key}")
        elif isinstance(a, list):
            self.assertEqual(len(a), len(b), path)
            for i, (x, y) in enumerate(zip(a, b)):
                self.assert_docs_close(x, y, f"{path}[{i}]")
        elif isinstance(a, float):
            # degC -> K and Phi/g0 round at 1e-13 relative; derivatives amplify it a little.
            self.assertTrue(math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12), f"{path}: {a} vs {b}")
        else:
            self.assertEqual(a, b, path)

    def test_packed_fill_masks_the_stencil(self):
        # One geopotential cell written as _FillValue in an int16 packed variable: netCDF4
        # masks it (NetCDF User Guide, attribute conventions: _FillValue, missing_value,
        # scale_factor/add_offset). The thermal wind then fails at that cell and at its four
        # stencil neighbours (physics.md, "Missing input"), so 5 cells count as missing.
        lat = np.arange(30.0, 60.1, 2.5)
        lon = np.arange(-20.0, 20.1, 2.5)
        z, t = baroclinic_fields(lat, lon, meridional_flow=5.0)
        j = int(np.argmin(np.abs(lat - 45.0)))
        i = int(np.argmin(np.abs(lon - 0.0)))
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "packed.nc")
            write(path, lat, lon, LEVELS, {"z": (z, "m", "geopotential_height"),
                                           "t": (t, "K", "air_temperature")},
                  fmt="NETCDF3_CLASSIC", packed=("z", "t"), fill_cells={"z": [(1, j, i)]})
            ds = ref.load(path, "latest", {})
        self.assertTrue(np.isnan(ds.fields["geopotential"][1, j, i]))
        self.assertEqual(int(np.isnan(ds.fields["geopotential"]).sum()), 1)
        doc = ref.profile(ds, [-5.0, 40.0, 5.0, 50.0], None)
        self.assertEqual(doc["layers"][0]["masked"]["missing"], 5)  # 1000-850 uses Z(850)
        self.assertEqual(doc["layers"][0]["valid_cells"], 5 * 5 - 5)
        self.assertEqual(doc["layers"][2]["masked"]["missing"], 0)  # 700-500 does not
        self.assertEqual(doc["levels"][1]["valid_cells"], 5 * 5 - 5)

    def test_pole_equator_and_below_ground_counts(self):
        # Mask reasons counted once per cell, precedence below_ground, pole, equator, missing
        # (physics.md, "What is undefined"); the expected counts come from the coordinates alone.
        lat = np.arange(-90.0, 90.1, 10.0)
        lon = np.arange(0.0, 360.0, 10.0)
        z, t = baroclinic_fields(lat, lon)
        lat2, lon2 = np.meshgrid(lat, lon, indexing="ij")
        ps = np.where((lat2 >= 60.0) & (lon2 <= 40.0), 800.0, 1013.0)  # a plateau, hPa
        with tempfile.TemporaryDirectory() as tmp:
            path = os.path.join(tmp, "glob.nc")
            write(path, lat, lon, LEVELS, {"z": (z, "m", "geopotential_height"),
                                           "t": (t, "K", "air_temperature")},
                  surface={"ps": (ps, "hPa", "surface_air_pressure")})
            doc = ref.profile(ref.load(path, "latest", {}), [-180.0, -90.0, 180.0, 90.0], None)
        n_lon = len(lon)
        plateau = int(np.sum(ps < 1000.0))
        plateau_pole = int(np.sum((ps < 1000.0) & (np.abs(lat2) == 90.0)))
        for layer in doc["layers"]:
            counts = layer["masked"]
            bottom_below = layer["bottom_hpa"] > 800.0
            self.assertEqual(counts["below_ground"], plateau if bottom_below else 0)
            self.assertEqual(counts["pole"], 2 * n_lon - (plateau_pole if bottom_below else 0))
            self.assertEqual(counts["equator"], n_lon)  # the 0 deg row only (|phi| < 5)
            self.assertEqual(counts["missing"], 0)
            self.assertEqual(layer["valid_cells"] + sum(counts.values()), len(lat) * n_lon)
            # Below ground, even thickness is missing; at the poles it stays defined.
        self.assertIsNotNone(doc["layers"][0]["thickness_m"])


GOLDEN_DIR = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "golden")


class Goldens(unittest.TestCase):
    """Properties the committed goldens must have whatever the fixtures hold."""

    def goldens(self):
        docs = {}
        for name in sorted(os.listdir(GOLDEN_DIR)):
            if name.endswith(".json"):
                with open(os.path.join(GOLDEN_DIR, name), encoding="utf-8") as fh:
                    docs[name[:-5]] = json.load(fh)
        self.assertTrue(docs, "no golden files")
        return docs

    def test_every_case_has_a_golden(self):
        with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "cases.json"),
                  encoding="utf-8") as fh:
            cases = json.load(fh)
        docs = self.goldens()
        self.assertEqual(sorted(c["name"] for c in cases), sorted(docs))
        for case in cases:
            self.assertEqual(docs[case["name"]]["dataset"], os.path.basename(case["fixture"]))

    def test_thermal_wind_is_the_difference_of_geostrophic_winds(self):
        # physics.md, "Thermal wind of a layer": with the geopotential method V_T equals
        # V_g(top) - V_g(bottom) to rounding. Box means are linear, so the box-mean vectors
        # agree too wherever the three means run over the same cells (equal valid counts).
        compared = 0
        for name, doc in self.goldens().items():
            levels = {lev["pressure_hpa"]: lev for lev in doc["levels"]}
            for layer in doc["layers"]:
                bottom, top = levels[layer["bottom_hpa"]], levels[layer["top_hpa"]]
                if layer["thickness_method"] != "geopotential" or layer["thermal_wind"] is None:
                    continue
                if not bottom["valid_cells"] == top["valid_cells"] == layer["valid_cells"]:
                    continue
                for comp in ("u_ms", "v_ms"):
                    diff = top["geostrophic_wind"][comp] - bottom["geostrophic_wind"][comp]
                    self.assertAlmostEqual(layer["thermal_wind"][comp], diff, delta=1e-9,
                                           msg=f"{name} {layer['bottom_hpa']}-{layer['top_hpa']}")
                compared += 1
        self.assertGreater(compared, 30)

    def test_balance_ratio_near_one_on_the_hydrostatic_fixture(self):
        # tidy_nc4.nc builds its heights from the trapezoid of virtual temperature in ln p
        # (fixtures/README.md; hypsometric equation, U.S. Standard Atmosphere 1976) and carries
        # the humidity, so the torques balance up to the float32 storage: ratio 1 within 1e-3.
        seen = 0
        for name, doc in self.goldens().items():
            if doc["dataset"] != "tidy_nc4.nc":
                continue
            for layer in doc["layers"]:
                if layer["balance_ratio"] is not None:
                    self.assertLess(abs(layer["balance_ratio"] - 1.0), 1e-3, name)
                    seen += 1
        self.assertGreater(seen, 10)


if __name__ == "__main__":
    unittest.main()
