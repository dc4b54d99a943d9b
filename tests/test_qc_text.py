"""Wording of the evening verdict reasons (docs/qc.md), on hand-made measures (fast)."""
from __future__ import annotations

import math

from tem.qc import station_verdicts
from tem.qc.measures import ChannelMeasures


def _channel(station, high, low, windows_clipped, windows=14):
    nan = math.nan
    return ChannelMeasures(
        station=station, component="ex", unit="V/m/A", offset_m=800.0, dead=False,
        noise_floor=1e-8, noise_slope=-0.5, last_usable=0.5, usable_gates=40, gates=42,
        duration=30.0, periods_total=12, periods_used=12, rejected_noisy=0, rejected_bad=0,
        outlier_fraction=0.0, clipped_high=high, clipped_low=low,
        windows_clipped=windows_clipped, windows=windows, offset=0.0, drift=0.0, wander=0.0,
        mains=0.0, full_scale=2.5, asymmetry=0.0, asymmetry_error=nan, polarity=nan,
        polarity_snr=nan, cut_offset=nan, cut_residual=nan)


def test_clipping_reason_counts_samples_in_words():
    # 3 of 14 half-periods (21 %) clipped is above clipped_check 0.10 and below
    # clipped_reoccupy 0.50 (docs/qc.md defaults): check. One sample is "1 sample", not "1 samples".
    one, two = station_verdicts([_channel("EM05", 1, 2, 3), _channel("EM06", 2, 1, 3)])
    assert one.verdict == "check" and two.verdict == "check"
    assert one.reasons == ("ex 21 % of half-periods clipped (1 sample at the positive rail, "
                           "2 at the negative)",)
    assert two.reasons == ("ex 21 % of half-periods clipped (2 samples at the positive rail, "
                           "1 at the negative)",)


def test_a_dead_channel_on_a_short_record_asks_for_whole_minutes():
    # a dead Ex on a 30 s record: re-occupy with the full recording time (docs/qc.md), 0.5 min;
    # the table once wrote "0" (rounded half to even), so a station to re-occupy read as
    # needing nothing. Whole minutes are rounded up (common practice, no source).
    from dataclasses import replace

    from tem.qc.verdict import stations_csv_text, whole_minutes

    dead = replace(_channel("EM04", 0, 0, 0), dead=True)
    (v,) = station_verdicts([dead])
    assert v.verdict == "reoccupy" and abs(v.extra_minutes - 0.5) < 1e-12
    assert stations_csv_text([v]).splitlines()[1].endswith(",1")
    assert [whole_minutes(x) for x in (0.0, 0.5, 2.0, 146.2, math.nan)] == ["0", "1", "2", "147", ""]


def test_class_medians_equal_their_definition_on_a_mixed_survey():
    """The offset-class medians, computed from one grouping of the survey, equal the definition
    (docs/qc.md) applied channel by channel: the median noise floor and last usable time of the
    live channels of the same component in the same factor-``class_ratio`` offset bin, or of the
    component survey-wide when the bin holds fewer than ``class_min``. A random survey of 300
    stations with dead channels, NaN floors, loops (offset 0) and sparse far classes."""
    from dataclasses import replace

    import numpy as np

    from tem.qc.verdict import QCSettings, class_medians, offset_classes

    rng = np.random.default_rng(7)
    base = _channel("S", 0, 0, 0)
    ms = []
    for i in range(300):
        for comp in ("ex", "dbzdt"):
            off = 0.0 if rng.random() < 0.05 else float(rng.choice([400, 700, 1500, 2600, 9000])
                                                          * rng.uniform(0.9, 1.1))
            ms.append(replace(base, station=f"S{i:03d}", component=comp, offset_m=off,
                              dead=bool(rng.random() < 0.1),
                              noise_floor=float("nan") if rng.random() < 0.05 else
                              float(rng.lognormal(-18, 1)),
                              last_usable=float("nan") if rng.random() < 0.1 else
                              float(rng.uniform(0.01, 1.0))))
    ms += [replace(base, station=f"F{i}", offset_m=40000.0 + i) for i in range(2)]  # a sparse class
    s = QCSettings()
    got = class_medians(ms, s)
    cls = offset_classes(ms, s.class_ratio)
    live = [m for m in ms if not m.dead and np.isfinite(m.noise_floor)]
    labels = set()
    for m in ms:
        group = [x for x in live if x.component == m.component
                 and cls[(x.station, x.component)] == cls[(m.station, m.component)]]
        label = "offset class"
        if len(group) < s.class_min:
            group, label = [x for x in live if x.component == m.component], "survey"
        lu = [x.last_usable for x in group if np.isfinite(x.last_usable)]
        want = (np.median([x.noise_floor for x in group]), np.median(lu), label)
        assert got[(m.station, m.component)] == want
        labels.add(label)
    assert labels == {"offset class", "survey"}        # both branches were taken
