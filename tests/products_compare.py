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


def assert_same_products(a, b):
    """Assert that project folders ``a`` and ``b`` hold the same products."""
    import lasio
    import segyio
    import xarray as xr

    assert files_of(a) == files_of(b)
    for name in files_of(a):
        if name.endswith(".csv"):
            assert (a / name).read_bytes() == (b / name).read_bytes(), name
        elif name.endswith(".nc"):
            x, y = xr.load_dataset(a / name, engine="h5netcdf"), xr.load_dataset(b / name,
                                                                                  engine="h5netcdf")
            assert set(x.variables) == set(y.variables), name
            for v in x.variables:
                np.testing.assert_array_equal(x[v].values, y[v].values,
                                              err_msg=f"{a.name}/{name} vs {b.name}: {v}")
                assert _attrs(x[v].attrs, (a, b)) == _attrs(y[v].attrs, (a, b)), (name, v)
            assert _attrs(x.attrs, (a, b)) == _attrs(y.attrs, (a, b)), name
        elif name.endswith(".las"):
            la, lb = lasio.read(a / name), lasio.read(b / name)
            assert [c.mnemonic for c in la.curves] == [c.mnemonic for c in lb.curves]
            for c in la.curves:
                np.testing.assert_array_equal(la[c.mnemonic], lb[c.mnemonic])
            for item in la.params:
                assert item.value == lb.params[item.mnemonic].value, (name, item.mnemonic)
        elif name.endswith(".sgy"):
            with segyio.open(a / name, ignore_geometry=True) as fa, \
                    segyio.open(b / name, ignore_geometry=True) as fb:
                assert fa.tracecount == fb.tracecount
                np.testing.assert_array_equal(fa.trace.raw[:], fb.trace.raw[:])
                for i in range(fa.tracecount):
                    assert dict(fa.header[i]) == dict(fb.header[i])
        elif name.endswith("export.json"):
            ma, mb = json.loads((a / name).read_text()), json.loads((b / name).read_text())
            assert ma["files"] == mb["files"]
