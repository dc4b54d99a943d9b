"""netCDF products as bytes: serialised in memory (h5netcdf), written with one atomic write.

Serialising first keeps the HDF5 library away from the disk: a full disk or a
file-size limit meets a plain Python write (one error line), never a failure
inside the C library, and a product can travel from a worker process to the
writer as bytes.
"""
from __future__ import annotations

from pathlib import Path

from .atomic import write_bytes_atomic

__all__ = ["netcdf_bytes", "write_netcdf"]


def netcdf_bytes(ds) -> bytes:
    """The netCDF-4 file of an xarray Dataset, as bytes.

    Serialised with dask's synchronous scheduler: inside a dask.distributed
    worker, xarray would otherwise ask the cluster for a write lock keyed on
    the in-memory buffer.
    """
    return bytes(_serialised(ds))


def _serialised(ds):
    """The file image as xarray returns it (a memoryview of its buffer in recent versions)."""
    import dask

    with dask.config.set(scheduler="synchronous"):
        return ds.to_netcdf(engine="h5netcdf")


def write_netcdf(ds, path) -> Path:
    """Write a Dataset to ``path`` atomically (from xarray's buffer: no copy of the image, which
    for a survey-wide models file is about 1 kB per station)."""
    return write_bytes_atomic(path, _serialised(ds))
