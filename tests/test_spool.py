"""The run's spool on disk (tem.io.spool) and the invert stage's row-wise products.

The spool must behave as the dict and list it stands for (insertion order, copies on
read, JSON values exactly round-tripped; Python's float repr is the shortest string that
reads back to the same double: Python language reference, "Floating point"), and the
models and posterior files built one station row at a time from it must be identical to
those built from the station results in memory.
"""
import json
import math

import numpy as np
import pytest

from tem.io.spool import Spool, spool_record


def test_spooled_dict_behaves_as_a_dict():
    sp = Spool()
    d = sp.dict("stations", {"B": {"status": "ok", "x": 1.5}, "A": {"status": "failed"}})
    d["C"] = {"status": "ok", "v": [1, 2, 3], "nan": math.nan}
    assert list(d) == ["B", "A", "C"]
    d["B"] = {"status": "failed", "x": 0.1 + 0.2}          # keeps its place
    assert list(d) == ["B", "A", "C"] and d["B"]["x"] == 0.1 + 0.2
    assert d.keys_where("ok") == ["C"] and d.keys_where("failed") == ["B", "A"]
    got = d["C"]
    got["v"].append(4)                                      # a copy: the spool is unchanged
    assert d["C"]["v"] == [1, 2, 3] and math.isnan(d["C"]["nan"])
    assert "A" in d and "Z" not in d and len(d) == 3 and d.get("Z", 7) == 7
    del d["A"]
    with pytest.raises(KeyError):
        d["A"]
    assert dict(d.items()) == {"B": {"status": "failed", "x": 0.1 + 0.2},
                               "C": d["C"]}
    other = sp.dict("other", {"B": 1})                      # sections do not mix
    assert list(other) == ["B"] and len(d) == 2
    d.clear()
    assert len(d) == 0 and list(other) == ["B"]


def test_spooled_list_and_arrays_round_trip():
    sp = Spool()
    values = [{"file": f"raw/{i}.mseed", "sha256": f"{i:064x}"} for i in range(5)]
    lst = sp.list("inputs", values)
    assert len(lst) == 5 and lst[0] == values[0] and lst[-1] == values[-1]
    assert lst[1:3] == values[1:3] and list(lst) == values and lst == values
    with pytest.raises(IndexError):
        lst[5]
    arrays = sp.arrays("draws")
    a = np.random.default_rng(1).normal(size=(7, 3))
    arrays["X"] = a
    b = arrays["X"]
    assert b.shape == (7, 3) and np.array_equal(a, b) and b.flags.writeable


def test_spool_record_and_run_json_text():
    """run.json written from a spooled record is the record itself (NaN as null)."""
    from tem.io.spool import json_chunks

    state = {"tem_format": "run", "stages": {
        "stack": {"inputs": [{"file": "a", "sha256": "0" * 64}], "notes": [],
                  "stations": {"S1": {"status": "ok", "timing_residual_us": math.nan,
                                      "checksums": {"stacked/S1.nc": "1" * 64}}}}},
        "stations": {"S1": {"x": 1.0, "qc_verdict": "good"}},
        "checksums": {"/p/a": {"size": 3, "mtime_ns": 5, "sha256": "2" * 64}}}
    plain = json.loads(json.dumps(state).replace("NaN", "null"))
    sp = Spool()
    spooled = spool_record(json.loads(json.dumps(state)), sp)
    assert type(spooled["stations"]).__name__ == "SpooledDict"
    assert type(spooled["stages"]["stack"]["inputs"]).__name__ == "SpooledList"
    text = "".join(json_chunks(spooled))
    assert json.loads(text) == plain
    assert text == "".join(json_chunks(json.loads(json.dumps(state))))


@pytest.fixture(scope="module")
def posterior_results():
    from tem.invert.data import station_data_from_arrays
    from tem.invert.station import InversionSettings, invert_station
    from tem.invert.synthetic import emberline_gates, emberline_station

    gates = emberline_gates(14, 1e-3, 1.0)
    settings = InversionSettings(kind="posterior", layers=12, max_iter=4, few_layers=3,
                                 posterior_draws=60, posterior_burn=60, posterior_chains=2,
                                 posterior_restarts=2, doi_method="sensitivity")
    out = []
    for i, x in enumerate((1200.0, 2400.0)):
        v, e, sim, _ = emberline_station(x, noise=0.03, seed=i, gates=gates)
        sd = station_data_from_arrays(sim, v, e, ["ex", "dbzdt"], x=x,
                                      gate_centre=np.sqrt(gates[0] * gates[1]))
        r = invert_station(sd, settings)
        r.station = f"P{i}"
        out.append(r)
    return out


def test_models_from_spooled_rows_equal_models_from_results(posterior_results):
    from tem.invert.posterior_products import (add_posterior, add_posterior_rows,
                                               posterior_row)
    from tem.invert.product import fit_text, model_row, models_from_results, models_from_rows

    results = posterior_results
    sp = Spool()
    for kind in ("smooth", "few-layer"):
        rows = sp.dict(kind)
        for r in reversed(results):                      # arrival order is not the survey's
            rows[r.station] = model_row(r, kind)
        order = [r.station for r in results]
        a = models_from_results(results, kind)
        b = models_from_rows(rows.view(order), kind)
        assert a.identical(b), kind
    post, draws = sp.dict("post"), sp.arrays("draws")
    for r in results:
        post[r.station] = posterior_row(r)
        draws[r.station] = r.posterior.flat
    order = [r.station for r in results]
    a = add_posterior(models_from_results(results, "few-layer"), results, 50, 1)
    b = add_posterior_rows(models_from_rows(sp.dict("fl", {r.station: model_row(r, "few-layer")
                                                           for r in results}).view(order),
                                            "few-layer"),
                           post.view(order), lambda i: draws[order[i]], 50, 1)
    assert a.identical(b)
    assert "target_top_p50" in b and np.isfinite(b["res_p50"].values).all()
    text = "".join(fit_text(r, "few-layer") for r in results)
    assert text.count("\n") == sum(r.d_obs.size for r in results)
    assert text.splitlines()[0].startswith("P0,")


def test_fit_table_from_pieces_holds_every_datum(posterior_results, tmp_path):
    """The fit table written from per-station pieces: one row per datum, values as computed."""
    import csv

    from tem.invert.product import FIT_COLUMNS, fit_text, write_fit_text

    results = posterior_results
    path = write_fit_text((fit_text(r, "smooth") for r in results), tmp_path / "fit.csv")
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == FIT_COLUMNS
    body = rows[1:]
    assert len(body) == sum(r.d_obs.size for r in results)
    k = 0
    for r in results:
        for i in range(r.d_obs.size):
            row = body[k]
            k += 1
            assert row[0] == r.station and row[8] == "smooth"
            assert row[9] == r.verdict.status                      # the model's verdict
            assert row[10] == {"ex": "V/m/A", "dbzdt": "T/s/A"}[row[2]]
            obs, std, pred, nres = (float(v) for v in row[4:8])
            assert obs == r.d_obs[i] and std == r.std[i] and pred == r.d_pred[i]
            assert nres == pytest.approx((r.d_obs[i] - r.d_pred[i]) / r.std[i], rel=1e-12)


def test_full_spool_is_one_line_output_error():
    """A spool that cannot grow (SQLite's 'database or disk is full', here by a page limit, as
    on a full temporary disk) stops the run with a one-line output error (exit status 1),
    never a traceback."""
    from tem.errors import TemOutputError

    sp = Spool()
    d = sp.dict("stations")
    d["S0"] = {"status": "ok"}
    sp.db.execute("PRAGMA max_page_count = 3")
    with pytest.raises(TemOutputError) as err:
        for i in range(1000):
            d[f"S{i}"] = {"status": "ok", "text": "x" * 2000}
    text = str(err.value)
    assert "\n" not in text and "temporary spool" in text and "full" in text
