"""The section grid file (``section.nc``): write and read.

A section grid is the Dataset from :func:`tem.section.stitch_models`
(dims ``distance`` and ``depth`` or ``elevation``), written with
``tem_format = "section"``, ``format_version = "1.0"`` and provenance.
Boolean variables are stored as int8 (netCDF has no boolean type) and
restored on reading.
"""
from __future__ import annotations

from pathlib import Path

from .. import __version__
from ..errors import input_error
from ..provenance import records_to_json
from .netcdf import write_netcdf

__all__ = ["FORMAT", "FORMAT_VERSION", "write_section_grid", "read_section_grid"]

FORMAT = "section"
FORMAT_VERSION = "1.0"


def write_section_grid(grid, path, records=()):
    """Write a section grid atomically with format attributes and provenance.

    Parameters
    ----------
    grid : xarray.Dataset
        From :func:`tem.section.stitch_models`.
    path : str or Path
        Output netCDF file (h5netcdf engine).
    records : sequence of dict
        Provenance records (earlier ones first).
    """
    out = grid.copy()
    out["below_doi"] = out["below_doi"].astype("int8")
    out.attrs.update({
        "tem_format": FORMAT,
        "format_version": FORMAT_VERSION,
        "tem_version": __version__,
        "provenance": records_to_json(list(records)),
    })
    write_netcdf(out, path)
    return Path(path)


def read_section_grid(path):
    """Read a section grid, checking format, major version and the variables export reads."""
    from . import checks
    from .schema import check_provenance

    name = Path(path) if not hasattr(path, "read") else "netCDF"
    ds = checks.open_netcdf(path, "section")
    check_provenance(ds, name)
    if not isinstance(ds.attrs.get("tem_format"), str) or ds.attrs["tem_format"] != FORMAT:
        raise input_error("tem_format", f"expected {FORMAT!r}, found "
                          f"{checks.show(ds.attrs.get('tem_format'))}", name)
    if str(ds.attrs.get("format_version", "")).split(".")[0] != FORMAT_VERSION.split(".")[0]:
        raise input_error("format_version", f"version {checks.show(ds.attrs.get('format_version'))}"
                          f" not supported; this tem reads {FORMAT_VERSION.split('.')[0]}.x", name)
    for var in ("log10_resistivity_full", "below_doi", "distance"):
        if var not in ds.variables:
            raise input_error(var, "required variable missing", name)
    if ds["log10_resistivity_full"].ndim != 2 or ds["below_doi"].dims != \
            ds["log10_resistivity_full"].dims:
        raise input_error("log10_resistivity_full", "expected a 2-D grid like below_doi", name)
    checks.variable(ds, "log10_resistivity_full", ds["log10_resistivity_full"].dims, name,
                    minimum=-6.0, maximum=12.0, allow_nan=True)
    checks.variable(ds, "below_doi", ds["below_doi"].dims, name, kind="b")
    checks.variable(ds, "distance", ("distance",), name, maximum=checks.LIMITS["coordinate"])
    for var in ("x", "y", "surface", "doi", "depth", "elevation"):
        if var in ds.variables:
            checks.variable(ds, var, ds[var].dims, name, maximum=checks.LIMITS["coordinate"],
                            allow_nan=True)
    ds["below_doi"] = ds["below_doi"].astype(bool)
    return ds
