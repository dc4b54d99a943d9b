"""Checks of a survey read from TOML that span several fields (docs/survey.md).

Each was accepted before and failed later, or not at all: a low-pass order
without a cut-off (every station failed at rhoa and invert, naming no file),
a station in another CRS than the transmitter (its offset silently wrong),
an ``.npy`` recording listed by two receivers (one station stacked the
other's data), a receiver on the transmitter, ``timing = "current"`` at a
station without a current receiver, station ids that would give two stations the same product
file names or a file name too long for the disk. Errors are one line naming the field; :func:`tem.survey.read_survey`
adds the file. :func:`projected_doc` turns a parsed survey in geographic
coordinates into the projected CRS it names, before the survey is built.
"""
from __future__ import annotations

from pathlib import Path

from .errors import input_error
from .io.packed import PackedTables

__all__ = ["check_survey", "check_station_names", "projected_doc"]


def check_survey(survey):
    """Return ``survey`` after the cross-field checks above (raises TemInputError)."""
    if survey.lowpass_order > 0 and not survey.lowpass_cutoff > 0.0:
        raise input_error("survey.lowpass_cutoff", f"must be positive with a low-pass order "
                          f"({survey.lowpass_order}), got {survey.lowpass_cutoff:g}")
    for st in survey.stations:
        # coordinates are never transformed: a station in another CRS than the transmitter
        # points would sit at a wrong offset from the wire (and in a wrong place on the line)
        if st.epsg and st.epsg != (survey.epsg or 0):
            raise input_error(f"station[{st.id}].epsg", f"EPSG:{st.epsg} differs from "
                              f"survey.epsg ({survey.epsg or 0}); give every coordinate in the "
                              "survey's CRS")
    check_station_names(st.id for st in survey.stations)
    tx = survey.transmitter
    for st in survey.stations:
        if tx.timing == "current" and st.current_receiver() is None:
            raise input_error(f"station[{st.id}].receiver", 'transmitter.timing = "current" '
                              "takes the switch times from a receiver with component "
                              "'current'; this station has none (add it, or use timing = "
                              '"survey")')
        _off_the_transmitter(tx, st)
    owner = {}
    for st in survey.stations:
        for rx in st.receivers:
            if rx.format not in (None, "npy"):
                continue
            for f in rx.files:
                if Path(f).suffix.lower() != ".npy":
                    continue
                key = Path(f).as_posix()
                if key in owner:   # an .npy holds one channel
                    raise input_error(f"station[{st.id}].receiver.files",
                                      f"{key} is also the {owner[key]} recording; an .npy file "
                                      "holds one channel")
                owner[key] = f"{st.id} {rx.component}"
    return survey


def _off_the_transmitter(tx, station):
    """Refuse a receiver on the transmitter wire or loop, where the field is not finite: the
    rule of the forward model (tem.forward.Simulation), a sample point of the receiver (the
    station for a coil, 7 points along an E dipole) within 1e-3 of the transmitter's size
    (a wire's length, a loop's longest side) of the wire. It was found only by the rhoa
    stage, after the stack, in a message that named no file."""
    import numpy as np

    pts = np.asarray(tx.points, float)
    if tx.kind == "loop":
        pts = np.vstack([pts, pts[:1]])
    a, d = pts[:-1], np.diff(pts, axis=0)
    length = np.hypot(*d.T)
    tol = 1e-3 * (length.max() if tx.kind == "loop" else length.sum())
    for rx in station.data_receivers:
        if rx.dipole is None:
            points = np.array([[station.x, station.y]])
        else:
            (x0, y0), (x1, y1) = rx.dipole
            s = 0.5 * (np.polynomial.legendre.leggauss(7)[0] + 1.0)
            points = np.c_[x0 + s * (x1 - x0), y0 + s * (y1 - y0)]
        for p in points:
            u = np.clip(np.sum((p - a) * d, axis=1) / length ** 2, 0.0, 1.0)
            gap = float(np.min(np.hypot(*(p - a - u[:, None] * d).T)))
            if gap < tol:
                raise input_error(f"station[{station.id}].receiver", f"the {rx.component} "
                                  f"receiver at ({p[0]:.1f}, {p[1]:.1f}) m lies on the "
                                  f"transmitter ({gap:.2g} m from the {tx.kind}, under "
                                  f"{tol:.2g} m): no finite field there; move it", None)


#: Longest station id, in bytes of UTF-8: file names are made of it (``<id>.nc``,
#: ``<id>_decay.png``, ``<id>.las``) and most file systems hold 255 bytes per name.
MAX_ID_BYTES = 200


def check_station_names(ids, file=None):
    """Products are named after station ids (``stacked/<id>.nc``, ``exports/las/<id>.las``
    with the id made file-name safe): ids that differ only in letter case or in Unicode
    normalisation (a precomposed ``É`` and ``E`` + combining accent look the same), or
    only in characters a LAS file name cannot hold, would overwrite each other's products
    on a case- or normalisation-insensitive disk (the defaults on macOS and Windows) or in
    the LAS export, which would find it only after the inversion; an id longer than
    :data:`MAX_ID_BYTES` in UTF-8 makes file names the disk cannot hold (a stage then
    failed the whole batch). Refused when the survey (or an import's system file, named
    ``file``) is read."""
    import unicodedata

    from .io.checks import safe_name, show

    def folded(s):      # caseless matching of identifiers (Unicode's NFKC_Casefold)
        return unicodedata.normalize("NFKC", unicodedata.normalize("NFKC", s).casefold())

    by_case, by_las = {}, {}
    for sid in ids:
        n = len(sid.encode("utf-8"))
        if n > MAX_ID_BYTES:
            raise input_error("station.id", f"{show(sid)} is {n} bytes in UTF-8; at most "
                              f"{MAX_ID_BYTES} (product file names are made of it)", file)
        other = by_case.setdefault(folded(sid), sid)
        if other != sid:
            if other.casefold() == sid.casefold():
                pair = f"{other!r} and {sid!r} differ only in letter case"
            else:       # escaped, or the message would show the same text twice
                pair = (f"{ascii(other)} and {ascii(sid)} look alike (they differ only in "
                        "Unicode normalisation or letter case)")
            raise input_error("station.id", f"{pair}; products are named "
                              "after station ids and would overwrite each other on a case- or "
                              "normalisation-insensitive disk: rename one", file)
        las = safe_name(sid)
        other = by_las.setdefault(las.casefold(), sid)
        if other != sid:
            raise input_error("station.id", f"{other!r} and {sid!r} give the same LAS file name "
                              f"({las}.las; letters, digits and . _ - only): rename one", file)


def projected_doc(doc, head):
    """Geographic input (``survey.epsg`` of a lat/lon CRS) projected to ``survey.projected_epsg``.

    x is longitude and y latitude (degrees) of the stations, the transmitter
    points and the dipole electrodes; they become metres of the stated
    projected CRS (a UTM zone), which is the survey's ``epsg`` from then on.
    """
    import copy

    from .io.crs import check_projected, is_geographic, project_to

    epsg = head.get("epsg", 0)
    target = head.get("projected_epsg")
    if not epsg or not is_geographic(epsg, "survey.epsg"):
        if target is not None and target != epsg:
            raise input_error("survey.projected_epsg", "only for geographic input (survey.epsg "
                              "of a latitude/longitude CRS); coordinates are already projected")
        return doc, head
    if target is None:
        raise input_error("survey.epsg", f"EPSG:{epsg} is geographic (lat/lon): state the "
                          "projected CRS to work in as survey.projected_epsg (e.g. a UTM zone)")
    check_projected(target, "survey.projected_epsg")
    doc = copy.deepcopy(doc)
    if isinstance(doc.get("station"), PackedTables):
        doc["station"] = list(doc["station"])
    head = doc["survey"]
    tx = doc.get("transmitter", {})
    if isinstance(tx, dict) and isinstance(tx.get("points"), list):
        tx["points"] = project_to(tx["points"], epsg, target, "transmitter.points").tolist()
    stations = doc.get("station", [])
    for i, st in enumerate(stations if isinstance(stations, list) else []):
        if not isinstance(st, dict):
            continue
        if st.get("epsg", epsg) != epsg:
            raise input_error(f"station[{i}].epsg", "differs from the geographic survey.epsg")
        st.pop("epsg", None)
        if "x" not in st or "y" not in st:   # (0, 0) is no default for a longitude, latitude
            raise input_error(f"station[{i}].{'y' if 'x' in st else 'x'}", "missing: a "
                              "geographic survey gives every station's longitude x and latitude y")
        (st["x"], st["y"]), = project_to([[st["x"], st["y"]]], epsg, target, f"station[{i}].x")
        receivers = st.get("receiver", [])
        for j, rx in enumerate(receivers if isinstance(receivers, list) else []):
            if isinstance(rx, dict) and isinstance(rx.get("dipole"), list):
                rx["dipole"] = project_to(rx["dipole"], epsg, target,
                                          f"station[{i}].receiver[{j}].dipole").tolist()
    head["epsg"] = int(target)
    del head["projected_epsg"]
    return doc, head
