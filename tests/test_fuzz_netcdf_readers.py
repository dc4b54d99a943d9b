"""Bad-input suite (issue 9), netCDF readers: stacked and gated products and the models file.

2000 field-level mutations each (a variable or attribute removed, given
another type or dimensions, values set to NaN, infinity, 1e300 or negative,
a dimension cut to 0-2 entries) are checked in memory by the reader's
checks (:func:`tem.io.stacked.check_dataset`, :func:`tem.io.models.check_models`
and :func:`tem.io.models.check_model_values`); a mutation that passes must
then be usable by the stage that reads it (gating, the inversion's data
vector, the models CSV rows). A smaller set of byte-level mutations of the
serialised files goes through the whole reader (HDF5 included: about 0.1-1 s
a file, so 150 each). Only :class:`tem.errors.TemInputError` may escape, as
one line naming the file.
"""
from __future__ import annotations

import io

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from mutate import FUZZ, byte_mutation, one_line_naming
from tem.errors import TemInputError

BYTES = settings(FUZZ, max_examples=150)

ATTR_VALUES = [1e300, -1e300, float("nan"), float("inf"), -1.0, 0.0, 10**18, "text", "", "\x00",
               "loop", "wire", "EM\x0001", "a/b", np.array([1.0, 2.0]), np.array([], float),
               np.array([1e300, 0.0, 0.0, 0.0]), np.array(["a", "b"])]
VALUES = [np.nan, np.inf, -np.inf, 1e300, -1e300, -1.0, 0.0, 1e-300, 7.0]


class Base(dict):
    """The valid files a test mutates (a short repr in hypothesis reports)."""

    def __repr__(self):
        return f"<valid {', '.join(self)}>"


@pytest.fixture(scope="module")
def products(tmp_path_factory):
    """A stacked and a gated file of one Emberline station (fictional), cut short."""
    import xarray as xr

    from tem.gate.windows import gate_stacked
    from tem.io.netcdf import netcdf_bytes
    from tem.stack.settings import STACK
    from tem.stack.stage import run as stack_run
    from tem.synth import emberline_survey, synth_survey

    root = tmp_path_factory.mktemp("nc")
    sv, models = emberline_survey(base_dir=root, sample_rate=1000.0, stations=["EM05"],
                                  current_channel=False)
    synth_survey(sv, models, root, seed=3, duration=24.0)
    res = stack_run(STACK.build({"estimator": "mean", "batches": 8}), sv, ["EM05"], root / "p")
    assert res.stations["EM05"].status == "ok", res.stations["EM05"].message
    full = xr.load_dataset(root / "p" / "stacked" / "EM05.nc", engine="h5netcdf")
    stacked = full.isel(time=slice(0, 400), excerpt_time=slice(0, 800))
    gated = gate_stacked(stacked, 4.0, "boxcar", None, None, 2.0)
    gated.attrs["tem_format"], gated.attrs["format_version"] = "gated", "1.1"
    return Base(stacked=stacked, gated=gated, stacked_bytes=netcdf_bytes(stacked),
                gated_bytes=netcdf_bytes(gated))


#: A mutation plan: 1 to 3 edits drawn independently of the Dataset (so replays agree),
#: applied by :func:`mutate_dataset`.
PLAN = st.lists(st.tuples(
    st.sampled_from(["drop", "attr", "attr", "drop_attr", "value", "value", "all", "dtype",
                     "dims", "cut"]),
    st.integers(0, 10**6), st.integers(0, 10**6), st.integers(0, 10**6),
    st.sampled_from(["str", "bool", "int"])), min_size=1, max_size=3)

TEXTS = ["", "\x00", "bogus", "ex", "a/b", "x" * 300]


def mutate_dataset(ds, plan):
    """A copy of ``ds`` with the edits of ``plan`` (see :data:`PLAN`)."""
    ds = ds.copy(deep=True)
    for op, i, j, k, kind in plan:
        names = sorted(map(str, ds.variables))
        attrs = sorted(ds.attrs)
        name = names[i % len(names)] if names else None
        if op == "drop" and name:
            ds = ds.drop_vars(name)
        elif op == "attr":
            key = attrs[j % len(attrs)] if attrs and j % 5 else "extra"
            ds.attrs[key] = ATTR_VALUES[k % len(ATTR_VALUES)]
        elif op == "drop_attr" and attrs:
            ds.attrs.pop(attrs[j % len(attrs)])
        elif op in ("value", "all") and name and ds[name].size:
            v = ds[name].values.copy()
            if v.dtype.kind in "fiub":
                v = v.astype(float)
                x = VALUES[k % len(VALUES)]
                if op == "all":
                    v[...] = x
                else:
                    v.flat[j % v.size] = x
            else:
                v = v.astype(object)
                v.flat[j % v.size] = TEXTS[k % len(TEXTS)]
            ds = ds.assign({name: (ds[name].dims, v)}) if name not in ds.coords else \
                ds.assign_coords({name: (ds[name].dims, v)})
        elif op == "dtype" and name:
            v = ds[name].values
            with np.errstate(all="ignore"):
                v = v.astype(str) if kind == "str" else v.astype(bool) if kind == "bool" else \
                    np.nan_to_num(v.astype(float) if v.dtype.kind in "fiub" else
                                  np.zeros(v.shape)).astype(np.int64)
            if name in ds.coords:
                ds = ds.assign_coords({name: (ds[name].dims, v)})
            else:
                ds = ds.assign({name: (ds[name].dims, v)})
        elif op == "dims" and name in ds.data_vars and ds[name].ndim:
            v = ds[name]
            try:
                ds = ds.drop_vars(name).assign({name: (tuple(f"{d}_x" for d in v.dims),
                                                       v.values)})
            except ValueError:             # a dimension of that name exists with another size
                pass
        elif op == "cut" and ds.sizes:
            dims = sorted(ds.sizes)
            ds = ds.isel({dims[j % len(dims)]: slice(0, k % 3)})
    return ds


def _one_line(fn, *args, name):
    try:
        return fn(*args)
    except TemInputError as exc:
        one_line_naming(exc, name)
        return None


# ---------------------------------------------------------------- stacked
def _use_stacked(ds):
    from tem.gate.windows import gate_stacked
    from tem.qc import qc_rows
    from tem.stack.stacking import StackResult

    for c in range(ds.sizes["channel"]):
        StackResult.from_dataset(ds, c)
    g = gate_stacked(ds, 4.0, "boxcar", None, None, 2.0)
    qc_rows(ds, g)


@FUZZ
@given(plan=PLAN)
def test_fuzz_stacked_fields(products, plan):
    from tem.io.stacked import check_dataset

    ds = mutate_dataset(products["stacked"], plan)
    ok = _one_line(check_dataset, ds, "stacked", "stacked/EM05.nc", name="stacked/EM05.nc")
    if ok is not None:                      # the gate stage's own checks: one line too
        _one_line(_use_stacked, ok, name="")


@BYTES
@given(data=st.data())
def test_fuzz_stacked_bytes(products, data):
    from tem.io.stacked import read_product

    raw = data.draw(byte_mutation(products["stacked_bytes"]))
    _one_line(read_product, io.BytesIO(raw), "stacked", name="netCDF")


# ---------------------------------------------------------------- gated
def _use_gated(ds):
    from tem.invert.data import station_data

    station_data(ds, file="gated/EM05.nc", build_simulation=False)


@FUZZ
@given(plan=PLAN)
def test_fuzz_gated_fields(products, plan):
    from tem.io.stacked import check_dataset

    ds = mutate_dataset(products["gated"], plan)
    ok = _one_line(check_dataset, ds, "gated", "gated/EM05.nc", name="gated/EM05.nc")
    if ok is not None:
        _one_line(_use_gated, ok, name="gated/EM05.nc")


@BYTES
@given(data=st.data())
def test_fuzz_gated_bytes(products, data):
    from tem.io.stacked import read_product

    raw = data.draw(byte_mutation(products["gated_bytes"]))
    _one_line(read_product, io.BytesIO(raw), "gated", name="netCDF")


# ---------------------------------------------------------------- models file
@pytest.fixture(scope="module")
def models():
    from profile_fixture import synthetic_models
    from tem.io.netcdf import netcdf_bytes

    ds = synthetic_models().isel(station=slice(0, 3), layer=slice(0, 8))   # small: fast checks
    return Base(ds=ds, bytes=netcdf_bytes(synthetic_models()))


def _check_models(ds, name):
    from tem.io.models import check_model_values, check_models, layer_rows

    ds = check_model_values(check_models(ds, name), name)
    rows = layer_rows(ds)
    assert all(np.isfinite(float(r["resistivity_ohmm"])) for r in rows)
    return ds


@FUZZ
@given(plan=PLAN)
def test_fuzz_models_fields(models, plan):
    ds = mutate_dataset(models["ds"], plan)
    _one_line(_check_models, ds, "models/models.nc", name="models/models.nc")


@BYTES
@given(data=st.data())
def test_fuzz_models_bytes(models, data):
    from tem.io.models import read_models

    raw = data.draw(byte_mutation(models["bytes"]))
    _one_line(read_models, io.BytesIO(raw), name="netCDF")


# ---------------------------------------------------------------- named cases
def _variant(ds, edit):
    ds = ds.copy(deep=True)
    return edit(ds) or ds


def _set(name, value, index=0):
    def edit(ds):
        v = ds[name].values.astype(float)
        v.flat[index] = value
        return ds.assign({name: (ds[name].dims, v)}) if name not in ds.coords else \
            ds.assign_coords({name: (ds[name].dims, v)})
    return edit


NAMED = [
    ("stacked", lambda ds: ds.drop_vars("influence"), "influence: required variable missing"),
    ("stacked", _set("time", 1e300, -1), "time: out of range"),
    ("stacked", _set("value", np.inf, 3), "value: holds infinite or missing values"),
    ("stacked", lambda ds: ds.attrs.update(x=1e300), "x: out of range"),
    ("stacked", lambda ds: ds.attrs.update(tx_points="-750 800 750 800"), "tx_points: expected"),
    ("stacked", lambda ds: ds.attrs.update(base_frequency="0.25"), "base_frequency: expected a "
     "number, got text"),
    ("stacked", lambda ds: ds.attrs.update(station="EM\x0005"), "station: holds a control"),
    ("stacked", lambda ds: ds.attrs.update(provenance="{oops"), "provenance: not a JSON list"),
    ("gated", _set("gate_open", 1e300), "gate_open: out of range"),
    ("gated", _set("gate_close", -1.0), "gate_close: must be positive"),
    ("gated", lambda ds: ds.drop_vars("usable"), "usable: required variable missing"),
    ("gated", lambda ds: ds.assign(usable=ds["usable"].astype(str)), "usable: expected true/false"),
    ("gated", lambda ds: ds.attrs.update(tem_format="stacked"), "tem_format: expected 'gated'"),
    ("gated", lambda ds: ds.attrs.update(format_version="2.0"), "format_version: '2.0' not"),
]


@pytest.mark.parametrize("fmt, edit, field", NAMED)
def test_named_product_cases(products, fmt, edit, field):
    from tem.io.stacked import check_dataset

    with pytest.raises(TemInputError) as exc:
        check_dataset(_variant(products[fmt], edit), fmt, f"{fmt}/EM05.nc")
    one_line_naming(exc.value, f"{fmt}/EM05.nc")
    assert field in str(exc.value), str(exc.value)


MODEL_NAMED = [
    (lambda ds: ds.drop_vars("chi2"), "chi2: required variable missing"),
    (_set("x", 1e300), "x: out of range"),
    (_set("resistivity", -5.0), "resistivity: non-positive"),
    (_set("resistivity", 1e300), "resistivity: out of range"),
    (_set("thickness", np.inf), "thickness: holds infinite"),
    (lambda ds: ds.assign_coords(station=("station", ["EP-01", "EP\x0002", "c"])),
     "station: holds a control or NUL"),
    (lambda ds: ds.assign_coords(station=("station", ["a", "a", "c"])),
     "station: a station id is listed twice"),
    (lambda ds: ds.attrs.update(epsg=10**15), "epsg: must be >= 0 and <= 1000000"),
]


@pytest.mark.parametrize("edit, field", MODEL_NAMED)
def test_named_models_cases(models, edit, field):
    with pytest.raises(TemInputError) as exc:
        _check_models(_variant(models["ds"], edit), "models/models.nc")
    one_line_naming(exc.value, "models/models.nc")
    assert field in str(exc.value), str(exc.value)


def test_corrupt_truncated_and_oversized_netcdf(tmp_path, products, models):
    import h5netcdf

    from tem.io.models import read_models
    from tem.io.stacked import read_product

    cases = {"garbage.nc": b"not a netCDF file\n" * 10,
             "truncated.nc": products["stacked_bytes"][:5000],
             "empty.nc": b"",
             "zeroed.nc": b"\x00" * 4096 + products["gated_bytes"][4096:]}
    for name, data in cases.items():
        (tmp_path / name).write_bytes(data)
        for read in (lambda p: read_product(p, "stacked"), read_models):
            with pytest.raises(TemInputError) as exc:
                read(tmp_path / name)
            one_line_naming(exc.value, tmp_path / name)
            assert "not readable as netCDF" in str(exc.value)
    # a compressed file that promises 10^12 samples is refused before anything is loaded
    big = tmp_path / "big.nc"
    with h5netcdf.File(big, "w") as f:
        f.dimensions = {"time": 10**12}
        f.create_variable("time", ("time",), float, chunks=(4096,), compression="gzip")
        f.attrs["tem_format"] = "stacked"
    with pytest.raises(TemInputError) as exc:
        read_product(big, "stacked")
    one_line_naming(exc.value, big)
    assert "time: 1000000000000 values" in str(exc.value)


def test_bad_products_at_the_command_line(tmp_path, products, capsys):
    from tem.cli import main

    garbage = tmp_path / "in" / "models.nc"
    garbage.parent.mkdir()
    garbage.write_bytes(b"\x89HDF\r\n\x1a\n" + b"\xff" * 600)
    assert main(["section", str(garbage), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and f"{garbage}: models: not readable as netCDF" in err, err
    # a per-station product: that station fails with one line naming file and variable
    st = tmp_path / "st"
    st.mkdir()
    bad = products["stacked"].drop_vars("value")
    (st / "EM05.nc").write_bytes(__import__("tem.io.netcdf").io.netcdf.netcdf_bytes(bad))
    rc = main(["gate", str(st), "--out", str(tmp_path / "g"), "--no-figures", "--no-progress",
               "--jobs", "1"])
    err = [ln for ln in capsys.readouterr().err.splitlines() if "EM05" in ln]
    assert rc == 2 and len(err) == 1, err             # a refused input: exit 2
    assert f"{st / 'EM05.nc'}: value: required variable missing" in err[0], err
