"""Comparison of two project folders, product by product (shared by the door and resume tests).

Two runs of the same stages with the same settings must give the same files
(figure names included), CSV bytes, netCDF variables and attributes (time
stamps and the project folder's path aside, and the checksums of products,
which differ only through their own time stamps), LAS curves and SEG-Y traces.
"""
from __future__ import annotations

import json
import re

import numpy as np

__all__ = ["files_of", "assert_same_products"]

_IGNORED = {"run.json", ".tem-lock"}


def files_of(root):
    """Relative names of the files of a project (its lock and run record aside)."""
    return sorted(p.relative_to(root).as_posix() for p in root.rglob("*")
                  if p.is_file() and p.name not in _IGNORED)


_STAMP = re.compile(r'"time_utc": "[^"]*"')


def _normal(text, roots):
    """Attribute text with project paths and time stamps taken out."""
    for r in roots:
        text = text.replace(str(r), "<project>")
    text = _STAMP.sub('"time_utc": ""', text)
    # checksums of products differ only through their own time stamps: keep those of raw inputs
    return re.sub(r'("file": "<project>/[^"]*\.nc", "sha256": ")[0-9a-f]+', r"\1", text)


def _attrs(attrs, roots):
    return {k: _normal(str(np.asarray(v).tolist() if isinstance(v, np.ndarray) else v), roots)
            for k, v in attrs.items()}


def _same_values(x, y, msg, rtol=0.0):
    """Equal arrays; with ``rtol``, floats equal to that relative tolerance.

    Floating-point sums are not associative, and the same station inverted in a
    worker process and in the parent can differ in the last bits (observed: 3e-12
    relative in a model's resistivity); every product printed for a person rounds
    far above that. Everything else must be exactly equal.
    """
    if rtol and np.asarray(x).dtype.kind == "f":
        np.testing.assert_allclose(x, y, rtol=rtol, atol=0, equal_nan=True, err_msg=msg)
    else:
        np.testing.assert_array_equal(x, y, err_msg=msg)


def _same_csv(pa, pb, rtol):
    """CSV files equal byte for byte, or cell by cell with numbers to ``rtol``."""
    if not rtol:
        assert pa.read_bytes() == pb.read_bytes(), pa.name
        return
    import csv
    with pa.open(encoding="utf-8") as fa, pb.open(encoding="utf-8") as fb:
        ra, rb = list(csv.reader(fa)), list(csv.reader(fb))
    assert len(ra) == len(rb) and [len(r) for r in ra] == [len(r) for r in rb], pa.name
    for i, (x, y) in enumerate(zip(ra, rb)):
        for u, v in zip(x, y):
            try:
                fu, fv = float(u), float(v)
            except ValueError:
                assert u == v, (pa.name, i, u, v)
                continue
            assert fu == fv or abs(fu - fv) <= rtol * max(abs(fu), abs(fv)), (pa.name, i, u, v)


def assert_same_products(a, b, rtol=0.0):
    """Assert that project folders ``a`` and ``b`` hold the same products.

    ``rtol = 0`` asks for identical numbers (the same process computed both);
    a run whose stations were computed in other processes than the reference's
    can differ in the last bits of a float (observed: 3e-12 relative in an
    inverted resistivity, from floating-point summation order), so the resume
    tests compare numbers to ``rtol`` (1e-9) and float32 SEG-Y samples to 1e-6.
    """
    import lasio
    import segyio
    import xarray as xr

    assert files_of(a) == files_of(b)
    for name in files_of(a):
        if name.endswith(".csv"):
            _same_csv(a / name, b / name, rtol)
        elif name.endswith(".nc"):
            x, y = xr.load_dataset(a / name, engine="h5netcdf"), xr.load_dataset(b / name,
                                                                                  engine="h5netcdf")
            assert set(x.variables) == set(y.variables), name
            for v in x.variables:
                _same_values(x[v].values, y[v].values, f"{a.name}/{name} vs {b.name}: {v}", rtol)
                assert _attrs(x[v].attrs, (a, b)) == _attrs(y[v].attrs, (a, b)), (name, v)
            assert _attrs(x.attrs, (a, b)) == _attrs(y.attrs, (a, b)), name
        elif name.endswith(".las"):
            la, lb = lasio.read(a / name), lasio.read(b / name)
            assert [c.mnemonic for c in la.curves] == [c.mnemonic for c in lb.curves]
            for c in la.curves:
                _same_values(la[c.mnemonic], lb[c.mnemonic], f"{name}: {c.mnemonic}", rtol)
            for item in la.params:
                u, v = item.value, lb.params[item.mnemonic].value
                if rtol and isinstance(u, float) and isinstance(v, float):
                    assert abs(u - v) <= rtol * max(abs(u), abs(v)), (name, item.mnemonic)
                else:
                    assert u == v, (name, item.mnemonic)
        elif name.endswith(".sgy"):
            with segyio.open(a / name, ignore_geometry=True) as fa, \
                    segyio.open(b / name, ignore_geometry=True) as fb:
                assert fa.tracecount == fb.tracecount
                if rtol:   # float32 samples: a last-bit flip is ~6e-8 relative
                    np.testing.assert_allclose(fa.trace.raw[:], fb.trace.raw[:], rtol=1e-6,
                                               atol=1e-6, err_msg=name)
                else:
                    np.testing.assert_array_equal(fa.trace.raw[:], fb.trace.raw[:])
                for i in range(fa.tracecount):
                    assert dict(fa.header[i]) == dict(fb.header[i])
        elif name.endswith("export.json"):
            ma, mb = json.loads((a / name).read_text()), json.loads((b / name).read_text())
            assert ma["files"] == mb["files"]
