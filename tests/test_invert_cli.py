"""tem invert end to end, in-process: gated files in; models, CSV and figures out;
a bad station is reported and the others still inverted (exit status 1).

Checks are on the product contract (docs/data-model.md) and on chi-square per
datum near its target (Constable, Parker & Constable 1987, Geophysics 52(3),
289-300); tolerances are common practice, no source.
"""
import csv

import numpy as np
import pytest

from tem.cli import main
from tem.invert.synthetic import gated_dataset
from tem.io.models import read_models

from gated_fixture import write_two_stations


@pytest.fixture(scope="module")
def gated_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("gated")
    gates, v, e = write_two_stations(folder)
    bad = gated_dataset("BAD", 3500.0, 0.0, v, np.zeros_like(e), ["ex", "dbzdt"], gates)
    bad.to_netcdf(folder / "BAD.nc", engine="h5netcdf")
    return folder


def test_invert_command_few_layer_with_a_bad_station(gated_folder, tmp_path, capsys):
    out = tmp_path / "inv"
    rc = main(["invert", str(gated_folder), "--out", str(out), "--kind", "few-layer",
               "--few-layers", "4", "--layers", "30", "--jobs", "2"])
    err = " ".join(capsys.readouterr().err.split())
    assert rc == 2                                    # one station's file refused (bad input)
    assert "station BAD failed" in err and "BAD.nc: error: all standard errors of usable gates " \
        "are zero" in err
    ds = read_models(out / "models" / "models.nc")
    assert ds.attrs["model_kind"] == "few-layer"
    assert list(ds["station"].values) == ["E0", "E1"]
    assert np.all(np.isfinite(ds["doi"].values))
    assert np.all(ds["chi2"].values < 2.0)            # near the target of 1 for 3 % noise
    assert np.all(np.isfinite(ds["log10_res_std"].values[:, :4]))
    rho = ds["resistivity"].values[:, :4]                       # each fit inside its range
    assert np.all((ds["resistivity_low"].values[:, :4] <= rho * (1 + 1e-9))
                  & (rho <= ds["resistivity_high"].values[:, :4] * (1 + 1e-9)))
    smooth = read_models(out / "models" / "models_smooth.nc")
    assert smooth.sizes["layer"] == 30
    res = smooth["resolution"].values                           # a diagonal of R: in [0, 1]
    assert np.all((res > -0.05) & (res < 1.05)) and np.nanmax(res) > 0.5
    assert (out / "figures" / "stations" / "E0_fit.png").stat().st_size > 10_000
    with open(out / "models" / "fit.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["station"] for r in rows} == {"E0", "E1"} and len(rows) == 40
    with open(out / "models" / "models.csv", encoding="utf-8") as fh:
        layers = list(csv.DictReader(fh))                       # the ranges reach the CSV
    assert len(layers) == 8
    for r, lo, hi in zip(layers, ds["resistivity_low"].values[:, :4].ravel(),
                         ds["resistivity_high"].values[:, :4].ravel()):
        assert float(r["resistivity_low_ohmm"]) == pytest.approx(lo, rel=1e-12)
        assert float(r["resistivity_high_ohmm"]) == pytest.approx(hi, rel=1e-12)
    import lasio                                                # and the LAS pseudo-wells
    las = lasio.read(_las_text(ds))
    d = las["DEPT"]
    k = np.searchsorted(ds["depth_top"].values[0], d, side="right") - 1
    # to the LAS file's 5 decimals
    assert np.allclose(las["RLOW"], ds["resistivity_low"].values[0][k], rtol=1e-6, atol=5e-6)
    assert np.allclose(las["RHIG"], ds["resistivity_high"].values[0][k], rtol=1e-6, atol=5e-6)


def _las_text(ds):
    import io

    from tem.export.las import las_for_station
    buf = io.StringIO()
    las_for_station(ds, 0, 5.0).write(buf, version=2.0)
    return buf.getvalue()


def test_invert_command_rejects_missing_input(tmp_path, capsys):
    rc = main(["invert", str(tmp_path / "nothing"), "--out", str(tmp_path / "o")])
    assert rc == 2
    assert "no such file or folder" in capsys.readouterr().err


def test_invert_command_rejects_bad_prior(gated_folder, tmp_path, capsys):
    rc = main(["invert", str(gated_folder), "--out", str(tmp_path / "o"), "--kind", "few-layer",
               "--prior", "porosity:1=3"])
    assert rc == 2
    err = capsys.readouterr().err
    assert "--prior: prior kind: unknown 'porosity'" in err and err.count("\n") == 1


def test_invert_command_lci(gated_folder, tmp_path, capsys):
    out = tmp_path / "lci"
    rc = main(["invert", str(gated_folder), "--out", str(out), "--lci", "--no-figures"])
    err = " ".join(capsys.readouterr().err.split())
    assert rc == 2 and "BAD.nc" in err                # refused, the rest inverted jointly
    ds = read_models(out / "models" / "models_lci.nc")
    assert ds.attrs["model_kind"] == "lci"
    assert list(ds["station"].values) == ["E0", "E1"]     # profile order (west to east)
    assert ds.sizes["layer"] == 30
    # one shared mesh for the profile
    assert np.allclose(ds["thickness"].values[0], ds["thickness"].values[1], equal_nan=True)
    assert np.all(ds["chi2"].values < 2.0)


def test_invert_command_refuses_a_non_gated_product(tmp_path, capsys):
    # a models-like netCDF is not a gated sounding: one line naming the file and tem_format
    import xarray as xr
    bad = tmp_path / "EM01.nc"
    xr.Dataset(attrs={"tem_format": "rhoa", "format_version": "1.0"}).to_netcdf(bad, engine="h5netcdf")
    rc = main(["invert", str(bad), "--out", str(tmp_path / "out"), "--no-figures"])
    err = capsys.readouterr().err
    assert rc != 0
    assert "tem_format" in err and "EM01.nc" in err
