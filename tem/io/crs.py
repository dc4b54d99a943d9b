"""Coordinate reference systems by EPSG code, through pyproj.

Inside tem every coordinate is projected metres (x east, y north). A survey
(or import system file) may give geographic coordinates (``epsg`` of a
geographic CRS, x = longitude, y = latitude, degrees) together with the
projected CRS to work in (``projected_epsg``, e.g. the UTM zone
``32633``); they are projected once, when the file is read. Exports can
write coordinates in another CRS (``tem export --epsg``).
"""
from __future__ import annotations

import numpy as np

from ..errors import input_error

__all__ = ["crs_of", "is_geographic", "check_projected", "transform_xy", "project_to"]


def crs_of(code, field="epsg", file=None):
    """The pyproj CRS of an EPSG code; an unknown code is one error naming the field."""
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    from .checks import integer, show

    if isinstance(code, bool) or not isinstance(code, (int, np.integer)) or code <= 0:
        raise input_error(field, f"expected a positive whole EPSG code, got {show(code)}", file)
    code = integer(code, field, file, minimum=1, maximum=2**31 - 1)   # before pyproj sees it
    try:
        return CRS.from_epsg(code)
    except CRSError:
        raise input_error(field, f"unknown EPSG code {code}", file) from None


def is_geographic(code, field="epsg", file=None) -> bool:
    return bool(crs_of(code, field, file).is_geographic)


def check_projected(code, field="projected_epsg", file=None):
    """A projected CRS in metres (e.g. a UTM zone), else one error."""
    crs = crs_of(code, field, file)
    unit = crs.axis_info[0].unit_name if crs.axis_info else ""
    if not crs.is_projected or unit not in ("metre", "meter"):
        raise input_error(field, f"EPSG:{code} ({crs.name}) is not a projected CRS in metres",
                          file)
    return crs


def transform_xy(x, y, src, dst, field="epsg", file=None):
    """(x, y) arrays from EPSG ``src`` to ``dst`` (x = longitude / easting first)."""
    from pyproj import Transformer

    if int(src) == int(dst):
        return np.asarray(x, float), np.asarray(y, float)
    t = Transformer.from_crs(crs_of(src, field, file), crs_of(dst, field, file), always_xy=True)
    xo, yo = t.transform(np.asarray(x, float), np.asarray(y, float))
    xo, yo = np.asarray(xo, float), np.asarray(yo, float)
    if not (np.all(np.isfinite(xo)) and np.all(np.isfinite(yo))):
        raise input_error(field, f"coordinates cannot be transformed from EPSG:{src} to "
                          f"EPSG:{dst}", file)
    return xo, yo


def project_to(lonlat, src, dst, what="coordinates", file=None):
    """Geographic (lon, lat) points -> projected (x, y) in ``dst``, inside its area of use.

    ``lonlat``: array-like (n, 2). A point outside the projected CRS's area
    of use (e.g. the wrong UTM zone) is refused naming ``what``.
    """
    try:
        pts = np.asarray(lonlat, float).reshape(-1, 2)
    except (TypeError, ValueError, OverflowError):
        raise input_error(what, "expected [longitude, latitude] numbers (degrees)", file) from None
    lon, lat = pts[:, 0], pts[:, 1]
    if np.any(np.abs(lat) > 90) or np.any(np.abs(lon) > 180):
        raise input_error(what, "geographic coordinates need longitude in [-180, 180] and "
                          "latitude in [-90, 90] degrees (x = longitude, y = latitude)", file)
    crs = check_projected(dst, "projected_epsg", file)
    area = crs.area_of_use
    if area is not None:
        slack = 1.0      # degrees beyond the zone's edge still allowed (common practice, no source)
        out = (lon < area.west - slack) | (lon > area.east + slack) | \
              (lat < area.south - slack) | (lat > area.north + slack)
        if np.any(out):
            i = int(np.argmax(out))
            raise input_error(what, f"lon {lon[i]:.4f}, lat {lat[i]:.4f} lies outside the area "
                              f"of EPSG:{dst} ({area.west:g}..{area.east:g} E, "
                              f"{area.south:g}..{area.north:g} N); state the right zone", file)
    x, y = transform_xy(lon, lat, src, dst, "projected_epsg", file)
    return np.column_stack([x, y])
