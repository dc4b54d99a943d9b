"""Coordinates by EPSG code (issue 15): geographic input projected to a stated UTM zone, exports
in another CRS, and the refusals (one line naming file and field).

Test coordinates are in open ocean on the equator (no survey site): on a UTM
zone's central meridian the easting is the false easting 500 000 m and on
the equator the northing is 0 (Snyder 1987, Map Projections: A Working
Manual, USGS PP 1395, ch. 8, Universal Transverse Mercator).
"""
from __future__ import annotations

import csv

import numpy as np
import pytest

pytest.importorskip("pyproj")

from tem.cli import main  # noqa: E402
from tem.errors import TemInputError  # noqa: E402
from tem.io.crs import project_to, transform_xy  # noqa: E402
from tem.survey import survey_from_dict  # noqa: E402

LON0 = -27.0      # central meridian of UTM zone 26 (EPSG:32626)


def test_central_meridian_and_equator_give_the_false_origin():
    xy = project_to([[LON0, 0.0]], 4326, 32626)
    np.testing.assert_allclose(xy, [[500000.0, 0.0]], atol=1e-6)


def _survey_doc(lon, lat, target=32626):
    d = 0.00045
    return {"survey": {"epsg": 4326, "projected_epsg": target},
            "transmitter": {"kind": "wire", "points": [[lon - 0.01, lat + 0.01],
                                                       [lon + 0.01, lat + 0.01]],
                            "current": 10.0, "base_frequency": 0.25,
                            "first_switch_off": "2025-06-02T08:00:00Z"},
            "station": [{"id": "EM01", "x": lon, "y": lat, "receiver": [
                {"component": "ex", "files": ["ex.npy"], "sample_rate": 1000.0,
                 "dipole": [[lon - d, lat], [lon + d, lat]]}]}]}


def test_a_geographic_survey_is_projected_to_the_stated_zone():
    sv = survey_from_dict(_survey_doc(LON0, 0.0))
    st = sv.stations[0]
    assert sv.epsg == 32626 and st.epsg == 32626
    assert st.x == pytest.approx(500000.0, abs=1e-6) and st.y == pytest.approx(0.0, abs=1e-6)
    # 0.0009 degrees of longitude on the equator: 100.19 m on the ellipsoid (a = 6378137 m,
    # WGS84) times the UTM scale 0.9996 on the central meridian (Snyder 1987, eq. 8-13)
    length = 6378137.0 * np.radians(0.0009) * 0.9996
    assert sv.stations[0].receivers[0].dipole_length == pytest.approx(length, rel=1e-6)
    tx = np.array(sv.transmitter.points)
    assert np.all(tx[:, 1] > 1000.0)                       # 0.01 degrees north, in metres


@pytest.mark.parametrize("doc, expected", [
    (lambda: _survey_doc(40.0, 0.0), "transmitter.points: lon 39.9900, lat 0.0100 lies outside "
                                     "the area of EPSG:32626"),
    (lambda: {**_survey_doc(LON0, 0.0), "survey": {"epsg": 4326}},
     "survey.epsg: EPSG:4326 is geographic (lat/lon): state the projected CRS"),
    (lambda: _survey_doc(LON0, 0.0, target=4326), "survey.projected_epsg: EPSG:4326"),
    (lambda: {**_survey_doc(LON0, 0.0), "survey": {"epsg": 99999999}},
     "survey.epsg: unknown EPSG code 99999999"),
])
def test_bad_coordinates_are_one_line(doc, expected):
    with pytest.raises(TemInputError) as exc:
        survey_from_dict(doc())
    assert expected in str(exc.value) and "\n" not in str(exc.value)


SYSTEM = """
epsg = 4326
projected_epsg = 32626

[transmitter]
kind = "loop"
points = [[{w}, -0.00045], [{e}, -0.00045], [{e}, 0.00045], [{w}, 0.00045]]
current = 1.0

[waveform]
kind = "step-off"

[[station]]
id = "EM01"
x = {lon}
y = 0.0

[[station]]
id = "EM02"
x = {lon2}
y = 0.0
"""


def test_imported_lonlat_soundings_export_in_another_zone(tmp_path):
    t = np.geomspace(1e-5, 1e-3, 12)
    # a 10 ohm-m half-space's late-time-like decay: any smooth negative curve will do here
    v = -1e-6 * (t / 1e-5) ** -2.5
    rows = "".join(f"{s},dbzdt,{ti!r},{vi!r},{abs(vi) * 0.05!r}\n"
                   for s in ("EM01", "EM02") for ti, vi in zip(t.tolist(), v.tolist()))
    (tmp_path / "d.csv").write_text("# unit = T/s/A\nstation,component,time_s,value,error\n"
                                    + rows)
    (tmp_path / "s.toml").write_text(SYSTEM.format(w=LON0 - 0.00045, e=LON0 + 0.00045, lon=LON0,
                                                   lon2=LON0 + 0.0002))
    out = tmp_path / "P"
    assert main(["import", str(tmp_path / "d.csv"), str(tmp_path / "s.toml"), "--out", str(out),
                 "--no-progress"]) == 0
    assert main(["invert", str(out / "gated"), "--out", str(out), "--jobs", "1", "--no-progress",
                 "--no-figures", "--layers", "8", "--max-iter", "3"]) == 0
    assert main(["section", str(out / "models" / "models.nc"), "--out", str(out), "--no-figures",
                 "--no-progress"]) == 0
    assert main(["export", str(out), "--out", str(out), "--no-progress", "--epsg", "32627",
                 "--what", "csv,las"]) == 0
    with open(out / "exports" / "models.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    got = {r["station"]: (float(r["x_m"]), float(r["y_m"]), r["epsg"]) for r in rows}
    # two paths must agree: lon/lat -> zone 26 -> zone 27 (ours) and lon/lat -> zone 27 directly
    direct = transform_xy([LON0, LON0 + 0.0002], [0.0, 0.0], 4326, 32627)
    for i, sid in enumerate(("EM01", "EM02")):
        assert got[sid][2] == "32627"
        assert got[sid][0] == pytest.approx(direct[0][i], abs=1e-3)
        assert got[sid][1] == pytest.approx(direct[1][i], abs=1e-3)
    assert "EPSG:32627" in (out / "exports" / "las" / "EM01.las").read_text()

    # the same models labelled with a geographic code (a hand edit): their x and y are metres,
    # and the LAS said "EPSG:4326" beside a projected X
    import xarray as xr

    ds = xr.load_dataset(out / "models" / "models.nc", engine="h5netcdf")
    ds.attrs["epsg"] = 4326
    (out / "models" / "models.nc").unlink()
    ds.to_netcdf(out / "models" / "models.nc", engine="h5netcdf")
    assert main(["export", str(out), "--out", str(tmp_path / "Q"), "--no-progress",
                 "--what", "csv"]) == 2
