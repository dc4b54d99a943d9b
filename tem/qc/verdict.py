"""A verdict per station (good / reoccupy / check) with reasons, from the QC measures.

The thresholds live in one settings table, ``[processing.qc]`` (:data:`QC_TABLE`,
:data:`QCSettings`); each says where its default comes from. The rules
(docs/qc.md):

reoccupy
    a dead channel; noise floor ``noise_ratio`` times the survey median of
    its component and offset class or more; clipped windows or rejected
    periods beyond the ``*_reoccupy`` shares.
check
    clipping, rejected periods or spikes beyond the ``*_check`` shares; a
    reversed polarity; the cut off the detected switch-offs; offset, drift
    or mains a large share of full scale; asymmetric half-cycles; a last
    usable time well short of the class median.
good
    none of these.

For a noisy station the extra recording time that brings its noise floor to
the survey median follows from how random noise falls with the number N of
stacked periods, as N^s with s = -1/2 (common practice, no source): T_extra
= T (r^(1/|s|) - 1) for a noise ratio r. The slope s is measured on the
station's own record (halves, quarters, eighths; ``noise_slope``) and that
measured value is used; a slope flatter than ``slope_flat`` means more time
will not help, and no time is given.
"""
from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from ..settings import Setting, SettingsTable

__all__ = ["QC_TABLE", "QCSettings", "StationVerdict", "offset_classes", "class_medians",
           "station_verdicts", "verdicts_of_stations", "stations_csv_text", "write_stations_csv",
           "VERDICTS", "read_stations_csv", "project_measures", "evening_qc"]

VERDICTS = ("good", "check", "reoccupy")
_NS = "common practice, no source"

def _ordered(v):
    """A re-occupy threshold below its check threshold would silence the check (a station
    with 41 % of periods rejected once got no reason at all)."""
    for check, reoccupy in (("rejected_check", "rejected_reoccupy"),
                            ("clipped_check", "clipped_reoccupy"),
                            ("flat_check", "flat_reoccupy"),
                            ("dropout_check", "dropout_reoccupy")):
        if v[reoccupy] < v[check]:
            return reoccupy, f"must be at least {check} ({v[check]:g}), got {v[reoccupy]:g}"
    return None


QC_TABLE = SettingsTable("qc", [
    Setting("noise_ratio", 2.0, "float", "", "noise floor over the survey median of its "
            "component and offset class at which a station is re-occupied", minimum=1.0,
            exclusive=True, source=_NS + "; a factor 2 in noise costs 4 times the recording"),
    Setting("class_ratio", 2.0, "float", "", "ratio of the largest to the smallest "
            "transmitter-receiver offset within one offset class", minimum=1.0, exclusive=True,
            source=_NS),
    Setting("class_min", 3, "int", "", "fewest live channels of a component in an offset class "
            "for a class median; smaller classes use the component's survey median", minimum=1,
            source=_NS),
    Setting("last_usable_ratio", 0.5, "float", "", "last usable time below this share of the "
            "class median is checked", minimum=0.0, maximum=1.0, source=_NS),
    Setting("rejected_check", 0.10, "float", "", "share of periods rejected whole (noisy or bad "
            "samples) that is checked", minimum=0.0, maximum=1.0, source=_NS),
    Setting("rejected_reoccupy", 0.50, "float", "", "share of periods rejected whole that "
            "re-occupies the station", minimum=0.0, maximum=1.0, source=_NS),
    Setting("flat_check", 0.02, "float", "", "share of half-period windows that are flat "
            "(at most 1 count peak to peak: the channel dropped out) that is checked",
            minimum=0.0, maximum=1.0, source=_NS),
    Setting("flat_reoccupy", 0.20, "float", "", "share of flat half-period windows that "
            "re-occupies the station (half or more: the channel is dead)", minimum=0.0,
            maximum=1.0, source="measured: with 5-25 % of a record flat the robust stack was "
            "unbiased, with 40 % one gate was 15 % low (docs/qc.md)"),
    Setting("dropout_check", 0.005, "float", "", "share of samples held constant for 4 ms "
            "or more inside live half-periods (brief drop-outs) that is checked", minimum=0.0,
            maximum=1.0, source=_NS),
    Setting("dropout_reoccupy", 0.02, "float", "", "share of samples in brief drop-outs that "
            "re-occupies the station", minimum=0.0, maximum=1.0,
            source="measured: 5 % of samples in 10 ms drop-outs put gates 7-100 % off "
            "(docs/qc.md)"),
    Setting("outlier_check", 0.01, "float", "", "share of used samples rejected as outliers "
            "(spikes) that is checked", minimum=0.0, maximum=1.0, source=_NS),
    Setting("clipped_check", 0.10, "float", "", "share of half-period windows holding a sample "
            "at either full-scale rail that is checked (isolated spikes stay below)",
            minimum=0.0, maximum=1.0, source=_NS),
    Setting("clipped_reoccupy", 0.50, "float", "", "share of windows with clipped samples that "
            "re-occupies the station (lower the gain)", minimum=0.0, maximum=1.0, source=_NS),
    Setting("offset_check", 0.25, "float", "", "baseline offset, as a share of full scale, "
            "that is checked", minimum=0.0, source=_NS),
    Setting("drift_check", 0.10, "float", "", "baseline change over the record, as a share of "
            "full scale, that is checked", minimum=0.0, source=_NS),
    Setting("mains_check", 0.25, "float", "", "mains amplitude at the logger, as a share of "
            "full scale, that is checked", minimum=0.0, source=_NS),
    Setting("asymmetry_check", 0.05, "float", "", "difference of positive and negative "
            "half-cycles, as a share of their mean, that is checked (when it is at least 3 "
            "standard errors)", minimum=0.0, source=_NS),
    Setting("timing_check", 2e-5, "float", "s", "offset or rms scatter of the detected "
            "switch-offs from the cut that is checked", minimum=0.0,
            source=_NS + "; 20 us shift a t^-2.5 decay by 1 % at 5 ms"),
    Setting("polarity_snr", 5.0, "float", "", "signal-to-noise of the on-time response "
            "needed to call a polarity reversed", minimum=0.0, source=_NS),
    Setting("slope_flat", -0.1, "float", "", "noise slope (d log noise / d log periods) above "
            "which more recording is not expected to help", maximum=0.0, source=_NS),
    Setting("dof_check", 10.0, "float", "", "degrees of freedom of the error bars below which "
            "a record is checked as short (its error bars uncertain by more than about 22 %, "
            "1/sqrt(2 dof))", minimum=1.0, source=_NS),
    Setting("dof_reoccupy", 4.0, "float", "", "degrees of freedom below which a record is too "
            "short to stack (about 8 half-periods; error bars uncertain by a third or more)",
            minimum=1.0, source="measured: with 4-6 three-window estimates the robust stack's "
            "normalised residuals had an rms of 3-4 (docs/stacking.md)"),
    Setting("extra_max", 480.0, "float", "min", "most extra recording time worth advising: a "
            "station that would need more is to be recorded at another time or place (the "
            "noise is interference more time will not average out)", minimum=1.0,
            maximum=1e5, source=_NS + "; one working day of recording"),
], "QCSettings", doc="Thresholds of the evening QC verdict (docs/qc.md).", checks=[_ordered])
QCSettings = QC_TABLE.cls


@dataclass(frozen=True)
class StationVerdict:
    """Verdict of one station.

    verdict : ``good``, ``check`` or ``reoccupy``.
    reasons : tuple of sentences with numbers (empty when good).
    extra_minutes : recording time to add (noise) or to record anew (dead
        channel, clipping, rejected periods), minutes; 0 when none is
        needed; NaN when more time is not expected to help.
    """

    station: str
    verdict: str
    reasons: tuple
    extra_minutes: float


# ---------------------------------------------------------------------------- survey context
def offset_classes(measures, class_ratio: float) -> dict:
    """Offset class (0, 1, ...) of every (station, component): factor-``class_ratio`` bins.

    Bins start at the smallest positive offset of the component in the survey;
    offsets of 0 (inside a loop) form class -1.
    """
    out = {}
    by_comp = {}
    for m in measures:
        by_comp.setdefault(m.component, []).append(m)
    for comp, ms in by_comp.items():
        pos = [m.offset_m for m in ms if m.offset_m > 0]
        base = min(pos) if pos else 1.0
        for m in ms:
            k = -1 if not m.offset_m > 0 else int(math.floor(
                math.log(m.offset_m / base) / math.log(class_ratio) + 1e-9))
            out[(m.station, comp)] = k
    return out


def class_medians(measures, settings=None) -> dict:
    """Survey medians per (station, component): noise floor, last usable time and the group.

    Returns {(station, component): (noise median, last-usable median, label)}.
    Live (not dead) channels with a finite noise floor count; a class with
    fewer than ``class_min`` of them falls back to the component's survey median.
    """
    s = settings or QCSettings()
    cls = offset_classes(measures, s.class_ratio)
    # live channels grouped once by (component, class) and by component: one pass over the
    # survey, not one per channel (a survey of thousands of stations)
    by_class, by_comp = {}, {}
    for m in measures:
        if not m.dead and np.isfinite(m.noise_floor):
            by_class.setdefault((m.component, cls[(m.station, m.component)]), []).append(m)
            by_comp.setdefault(m.component, []).append(m)
    memo = {}

    def medians(key, group, label):
        if key not in memo:
            if not group:
                memo[key] = (float("nan"), float("nan"), label)
            else:
                lu = [x.last_usable for x in group if np.isfinite(x.last_usable)]
                memo[key] = (float(np.median([x.noise_floor for x in group])),
                             float(np.median(lu)) if lu else float("nan"), label)
        return memo[key]

    out = {}
    for m in measures:
        key = (m.component, cls[(m.station, m.component)])
        group = by_class.get(key, [])
        if len(group) >= s.class_min:
            out[(m.station, m.component)] = medians(key, group, "offset class")
        else:
            out[(m.station, m.component)] = medians(m.component, by_comp.get(m.component, []),
                                                    "survey")
    return out


# ---------------------------------------------------------------------------- rules
def _pct(x):
    return f"{100.0 * x:.0f} %" if x >= 0.1 else f"{100.0 * x:.1f} %"


def whole_minutes(minutes) -> str:
    """Extra recording time as text in whole minutes, rounded up (a station to re-occupy
    never reads 0; 0.5 min is "1"); "" when not finite, "0" when nothing is needed."""
    if minutes is None or not np.isfinite(minutes):
        return ""
    return str(math.ceil(round(float(minutes), 6))) if minutes > 0 else "0"


def _extra_for_noise(m, ratio, s):
    """(minutes to add, slope used, how) for a noise ratio ``ratio`` > 1."""
    slope = m.noise_slope
    how = f"noise falls as N^{slope:.2f} on this record" if np.isfinite(slope) else \
        "noise assumed to fall as N^-0.50"
    if not np.isfinite(slope):
        slope = -0.5
    if slope > s.slope_flat:
        return float("nan"), how + ": more time will not help; record at another time or place"
    slope = max(slope, -1.0)
    minutes = m.duration / 60.0 * (ratio ** (1.0 / abs(slope)) - 1.0)
    if not minutes <= s.extra_max:
        return float("nan"), (how + f": it would take {_duration(minutes)} more, beyond the "
                              f"{s.extra_max:g} min worth recording; record at another time or "
                              "place, or find the source of the noise")
    return minutes, how


def _duration(minutes):
    """Minutes as words a crew reads at a glance: '45 min', '7.5 h', '312 days'."""
    if minutes < 120:
        return f"{minutes:.0f} min"
    if minutes < 2 * 1440:
        return f"{minutes / 60:.1f} h"
    return f"{minutes / 1440:.3g} days"


def _mains_cause(m, s) -> str:
    """" with mains 0.3 V at the logger (12 % of full scale)" when the mains is at least a
    fifth of ``mains_check`` of full scale, else "": a likely cause of noise or rejected
    periods, named (mains whose level or phase wanders between periods is not cancelled by
    the three-window estimate; an independent review found 24-31 % of periods rejected, and
    noise floors 100 times the median, under 0.3 V of mains with no word of it)."""
    fs = m.full_scale
    if np.isfinite(m.mains) and np.isfinite(fs) and fs > 0 and \
            m.mains >= 0.2 * s.mains_check * fs:
        return f" with mains {m.mains:.2g} V at the logger ({_pct(m.mains / fs)} of full scale)"
    return ""


def _channel_rules(m, med, s):
    """(reoccupy reasons, check reasons, extra minutes) of one channel."""
    re, ck, extra = [], [], 0.0
    c = m.component
    full = m.duration / 60.0
    if m.dead:
        share = (f" for {_pct(m.flat_fraction)} of the record"
                 if np.isfinite(m.flat_fraction) and m.flat_fraction < 0.995 else "")
        return [f"{c} dead: flat record{share} (peak-to-peak at most 1 count)"], [], full
    def grade(share, check, reoccupy, words, re_tail="", ck_tail=""):
        """A share judged by its check and re-occupy thresholds; ``words()`` the reason."""
        nonlocal extra
        if not (np.isfinite(share) and share >= check):
            return
        if share >= reoccupy:
            re.append(words() + re_tail)
            extra = max(extra, full) if np.isfinite(extra) else extra
        else:
            ck.append(words() + ck_tail)

    grade(m.flat_fraction, s.flat_check, s.flat_reoccupy,
          lambda: f"{c} flat for {_pct(m.flat_fraction)} of the record (at most 1 count peak "
                  "to peak: receiver, cable or logger dropped out)",
          "; too much for the stack to reject: record anew", "; those periods rejected")
    grade(m.dropout_fraction, s.dropout_check, s.dropout_reoccupy,
          lambda: f"{c} drops out briefly: {_pct(m.dropout_fraction)} of samples held "
                  "constant for 4 ms or more inside live periods (a loose connector or cable?)",
          "; the stack cannot reject them: record anew")
    noise_med, lu_med, label = med
    if np.isfinite(m.noise_floor) and noise_med > 0:
        r = m.noise_floor / noise_med
        if r >= s.noise_ratio:
            minutes, how = _extra_for_noise(m, r, s)
            tail = f"{whole_minutes(minutes)} min more to reach the median" \
                if np.isfinite(minutes) else ""
            re.append(f"{c} noise floor {r:.1f}x the {label} median ({m.noise_floor:.2g} against "
                      f"{noise_med:.2g} {m.unit}){_mains_cause(m, s)}; {how}"
                      + (f": {tail}" if tail else ""))
            extra = max(extra, minutes) if np.isfinite(minutes) else float("nan")
    if np.isfinite(m.last_usable) and np.isfinite(lu_med) and \
            m.last_usable < s.last_usable_ratio * lu_med:
        ck.append(f"{c} last usable time {m.last_usable:.2g} s against {lu_med:.2g} s "
                  f"({label} median)")
    elif not np.isfinite(m.last_usable) and m.gates:
        ck.append(f"{c} no usable gate")
    if np.isfinite(m.mains_on_line):
        re.append(f"{c} mains harmonic at {m.mains_on_line:.2f} Hz lies on a line of the "
                  "transmitter's response: it stacks with the signal and cannot be removed; "
                  "record at another time or place")
        extra = float("nan")
    dof = m.dof
    if np.isfinite(dof) and dof < s.dof_check and not m.dead:
        uncertain = f"uncertain by about {_pct(1.0 / math.sqrt(2.0 * dof))}"
        if 0 < m.batches < m.periods_total:
            # the stack's batches setting, not the record, limits them: more time won't help
            ck.append(f"{c} error bars rest on {dof:.1f} degrees of freedom ({m.batches} "
                      f"batches of {m.periods_total} transient estimates), {uncertain}: "
                      "raise [processing.stack] batches")
        else:
            # the degrees of freedom grow with the record (about 2 three-window estimates
            # each for white windows, tem.stack.batchvar): the time to reach dof_check
            need = m.duration / 60.0 * (s.dof_check / dof - 1.0)
            words = (f"{c} record short: {m.periods_total} transient estimates "
                     f"({m.duration:.3g} s), {dof:.1f} degrees of freedom; its error bars are "
                     + uncertain)
            if dof < s.dof_reoccupy:
                re.append(words + f": too short to stack, {whole_minutes(need)} min more")
                extra = max(extra, need) if np.isfinite(extra) else extra
            else:
                ck.append(words)
    nw = max(m.windows, 1)
    fc = m.windows_clipped / nw
    grade(fc, s.clipped_check, s.clipped_reoccupy,
          lambda: f"{c} {_pct(fc)} of half-periods clipped ({m.clipped_high} "
                  f"sample{'' if m.clipped_high == 1 else 's'} at the positive rail, "
                  f"{m.clipped_low} at the negative)", ": lower the gain")
    rej = (m.rejected_noisy + m.rejected_bad) / max(m.periods_total, 1)

    def rejected():
        text = (f"{c} {_pct(rej)} of periods rejected ({m.rejected_noisy} noisy, "
                f"{m.rejected_bad} with bad samples)")
        return text + _mains_cause(m, s)

    # a record too short to stack has no statistics to reject periods or spikes by (3
    # estimates of clean noise read as 5 % spikes): its shortness is the reason given
    too_short = np.isfinite(dof) and dof < s.dof_reoccupy and not 0 < m.batches < m.periods_total
    if not too_short:
        grade(rej, s.rejected_check, s.rejected_reoccupy, rejected)
    if m.outlier_fraction >= s.outlier_check and not too_short:
        ck.append(f"{c} spikes: {_pct(m.outlier_fraction)} of samples rejected as outliers")
    if np.isfinite(m.polarity) and m.polarity < 0 and m.polarity_snr >= s.polarity_snr:
        what = (f"apparent DC resistivity {m.polarity:.3g} ohm-m" if c in ("ex", "ey")
                else f"{m.polarity:.2f}x the primary field")
        ck.append(f"{c} polarity reversed: on-time response opposite to the transmitter's "
                  f"({what}); check the wiring")
    fs = m.full_scale if np.isfinite(m.full_scale) and m.full_scale > 0 else float("nan")
    if np.isfinite(fs):
        if np.isfinite(m.offset) and abs(m.offset) >= s.offset_check * fs:
            ck.append(f"{c} offset {m.offset:.2g} V ({_pct(abs(m.offset) / fs)} of full scale)")
        change = abs(m.drift) * m.duration if np.isfinite(m.drift) else float("nan")
        if np.isfinite(change) and change >= s.drift_check * fs:
            ck.append(f"{c} drift {m.drift * 60.0:.2g} V/min, {change:.2g} V over the record "
                      f"({_pct(change / fs)} of full scale)")
        if np.isfinite(m.mains) and m.mains >= s.mains_check * fs:
            ck.append(f"{c} mains {m.mains:.2g} V ({_pct(m.mains / fs)} of full scale)")
    # a = (P - N)/(P + N): their difference as a share of their mean is 2a (a current 10 %
    # larger one way gives a = 0.048; the message once said 4.8 %, and 10 % went unseen)
    diff = 2.0 * m.asymmetry
    if np.isfinite(diff) and diff >= s.asymmetry_check and \
            not m.asymmetry < 3.0 * m.asymmetry_error:
        ck.append(f"{c} positive and negative half-cycles differ by {_pct(diff)}")
    return re, ck, extra


def station_verdicts(measures, settings=None, failed=None) -> list:
    """A :class:`StationVerdict` per station from all channels' :class:`ChannelMeasures`.

    failed : optional {station: message} of stations that could not be
        processed; each gets ``check`` with the message as its reason.
    Stations come out in the order first met in ``measures``, failed ones last.
    """
    by_station = {}
    for m in measures:
        by_station.setdefault(m.station, []).append(m)
    return verdicts_of_stations(lambda: iter(by_station.items()), settings, failed)


def verdicts_of_stations(stations, settings=None, failed=None) -> list:
    """:func:`station_verdicts` of a survey read station by station, twice.

    stations : a function of no arguments returning an iterator of ``(station, [ChannelMeasures
        of that station])``; it is called twice (the survey medians first, then each station's
        rules), so the caller need not hold every station's measures at once: only the six
        numbers per channel the medians need are kept.
    """
    s = settings or QCSettings()
    light = [_Light(m.station, m.component, m.offset_m, m.dead, m.noise_floor, m.last_usable)
             for _, chans in stations() for m in chans]
    med = class_medians(light, s)
    del light
    out, seen = [], set()
    for sid, chans in stations():
        seen.add(sid)
        re, ck, extra = [], [], 0.0
        for m in chans:
            r, c, e = _channel_rules(m, med[(m.station, m.component)], s)
            re += r
            ck += c
            extra = float("nan") if not np.isfinite(e) else max(extra, e) if np.isfinite(extra) \
                else extra
        t = {m.cut_offset for m in chans if np.isfinite(m.cut_offset)}
        if t:
            off = max(t, key=abs)
            jit = max((m.cut_residual for m in chans if np.isfinite(m.cut_residual)), default=0.0)
            if abs(off) >= s.timing_check or jit >= s.timing_check:
                ck.append(f"timing: switch-offs on the current channel {off * 1e3:+.3f} ms from "
                          f"the cut (scatter {jit * 1e6:.1f} us rms)")
        verdict = "reoccupy" if re else "check" if ck else "good"
        out.append(StationVerdict(sid, verdict, tuple(re + ck),
                                  extra if verdict == "reoccupy" else 0.0))
    for sid, msg in (failed or {}).items():
        if sid not in seen:
            out.append(StationVerdict(sid, "check", (f"not processed: {msg}",), float("nan")))
    return out


class _Light(NamedTuple):
    """What the survey medians need of a channel's measures."""

    station: str
    component: str
    offset_m: float
    dead: bool
    noise_floor: float
    last_usable: float


def stations_csv_text(verdicts) -> str:
    """``station,verdict,reasons,extra_minutes`` with reasons joined by "; " (CSV text)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["station", "verdict", "reasons", "extra_minutes"])
    for v in verdicts:
        minutes = whole_minutes(v.extra_minutes)
        w.writerow([v.station, v.verdict, "; ".join(v.reasons), minutes])
    return buf.getvalue()


def read_stations_csv(path) -> list:
    """Rows of a ``qc/stations.csv`` table as dicts of strings (station, verdict, reasons,
    extra_minutes), checked: one row per station, each verdict one of :data:`VERDICTS`.

    A table that cannot be read, lacks a column, repeats a station, has an unknown
    verdict or extra minutes that are not a number in 0..1e6 raises
    :class:`tem.errors.TemInputError` naming the file and field.
    """
    from ..errors import input_error
    from ..io import checks

    need = ("station", "verdict", "reasons", "extra_minutes")
    # not UTF-8, a NUL (which went on into the models file and its exports), a folder
    text = checks.read_text(path, "stations.csv")
    try:
        reader = csv.DictReader(io.StringIO(text, newline=""))
        missing = [c for c in need if c not in (reader.fieldnames or [])]
        if missing:
            raise input_error(missing[0], "column missing from the evening QC table", path)
        rows = [{k: (r.get(k) or "").strip() for k in need} for r in reader]
    except csv.Error as exc:
        raise input_error("stations.csv", f"not readable as CSV ({exc})", path) from None
    seen = set()
    for n, r in enumerate(rows, start=2):
        if not r["station"]:
            raise input_error("station", f"empty on line {n}", path)
        if r["station"] in seen:
            raise input_error("station", f"{r['station']} listed twice (line {n})", path)
        seen.add(r["station"])
        if r["verdict"] not in VERDICTS:
            raise input_error("verdict", f"{r['verdict']!r} on line {n} ({r['station']}); valid: "
                              f"{', '.join(VERDICTS)}", path)
        if r["extra_minutes"]:
            # was turned into NaN (text) or carried as it stood (negative) into every models file
            checks.number(r["extra_minutes"], f"extra_minutes: line {n} ({r['station']})", path,
                          parse_text=True, minimum=0.0, maximum=1e6)
    return rows


def write_stations_csv(project, verdicts):
    """Write ``<project>/qc/stations.csv`` atomically; returns its path."""
    from pathlib import Path

    from ..io.atomic import write_text_atomic
    return write_text_atomic(Path(project) / "qc" / "stations.csv", stations_csv_text(verdicts))


def project_measures(project, stations=None) -> list:
    """:class:`ChannelMeasures` of every station with both ``stacked/`` and ``gated/`` products.

    project : the project folder (``stacked/<station>.nc``, ``gated/<station>.nc``).
    stations : optional station ids (order kept); default every stacked file, sorted.
    A station without a gated file is measured from its stacked file alone.
    """
    from pathlib import Path

    from ..io.stacked import read_product
    from .measures import channel_measures
    root = Path(project)
    ids = list(stations) if stations is not None else sorted(
        p.stem for p in (root / "stacked").glob("*.nc"))
    out = []
    for sid in ids:
        st = read_product(root / "stacked" / f"{sid}.nc", "stacked")
        g_path = root / "gated" / f"{sid}.nc"
        g = read_product(g_path, "gated") if g_path.exists() else None
        out += channel_measures(st, g)
    return out


def evening_qc(project, settings=None, stations=None, failed=None):
    """Measures, verdicts and ``<project>/qc/stations.csv`` from a project's products.

    Returns ``(verdicts, measures)``; see :func:`project_measures` and
    :func:`station_verdicts`.
    """
    measures = project_measures(project, stations)
    verdicts = station_verdicts(measures, settings, failed)
    write_stations_csv(project, verdicts)
    return verdicts, measures
