"""Tests for tem.section (profile geometry, stitching, pseudo-sections, depth to time)
and the section figures of tem.section.plot.

Sources of the checks:
* geometry: orthogonal projection of a point on a segment and arc length of a
  polyline (elementary Euclidean geometry, hand computation);
* stitching: the definition in tem/section/profile.py (the layer holding a depth;
  linear interpolation in log10 resistivity), checked against an independent
  loop over the layers written here;
* two-way time through interval velocities: t(z) = 2 sum h_i / v_i (vertical
  ray, e.g. Sheriff & Geldart 1995, Exploration Seismology, section on
  velocity, from memory; closed form, hand computation).
"""
from __future__ import annotations

import numpy as np
import pytest

from profile_fixture import CONDUCTOR, CONDUCTOR_TOPS, DOI, HOST, X, Y, Z, synthetic_models
from profile_fixture import layer_lookup as _lookup
from tem.errors import TemInputError
from tem.section import (check_velocity_table, depth_to_twt, layer_values, points_at_chainage,
                         polyline_chainage, pseudo_section_grid, station_line, stitch_grid,
                         stitch_models, twt_to_depth)

# the section settings of the stitching tests (as the section stage passes them)
PROFILE = {"order": "given", "lateral": "linear", "vertical": "depth"}




# ------------------------------------------------------------------ geometry
def test_chainage_on_bent_line():
    # L-shaped line: (0,0) -> (100,0) -> (100,50). Hand computation.
    lx, ly = np.array([0.0, 100.0, 100.0]), np.array([0.0, 0.0, 50.0])
    px = np.array([30.0, 110.0, 90.0, -20.0])
    py = np.array([-4.0, 20.0, 45.0, 3.0])
    s, off = polyline_chainage(px, py, lx, ly)
    # (30,-4): on leg 1 at 30, offset 4. (110,20): leg 2 at 100+20, offset 10.
    # (90,45): leg 2 at 145 (offset 10) beats leg 1 (offset 45). (-20,3): clamped to
    # the first vertex, chainage 0, offset sqrt(400+9).
    np.testing.assert_allclose(s, [30.0, 120.0, 145.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(off, [4.0, 10.0, 10.0, np.hypot(20, 3)], atol=1e-12)


def test_points_at_chainage_inverts_projection():
    lx, ly, _ = station_line(X, Y, "given")
    s = np.array([0.0, 120.0, 500.0, 610.0, 999.0])
    px, py = points_at_chainage(lx, ly, s)
    s2, off = polyline_chainage(px, py, lx, ly)
    np.testing.assert_allclose(s2, s, atol=1e-6)
    np.testing.assert_allclose(off, 0.0, atol=1e-6)
    # Station chainages of the fixture: legs of 500 m, then two of 250 m (hand: 176.78*sqrt2).
    sc, _ = polyline_chainage(X, Y, lx, ly)
    np.testing.assert_allclose(sc, [0, 250, 500, 750, 1000], atol=0.01)


def test_principal_order_sorts_shuffled_stations():
    perm = np.array([3, 0, 4, 1, 2])
    _, _, index = station_line(X[perm], Y[perm], order="principal")
    np.testing.assert_array_equal(perm[index], np.arange(5))


def test_unknown_order_and_degenerate_line():
    with pytest.raises(TemInputError, match="order"):
        station_line(X, Y, "alphabetical")
    with pytest.raises(TemInputError, match="line"):
        polyline_chainage(X, Y, [0.0, 0.0], [1.0, 1.0])


# ------------------------------------------------------------------ stitching
def test_layer_values_boundaries_padding_and_negative_depth():
    top = np.array([[0.0, 10.0, 30.0], [0.0, 5.0, np.nan]])
    val = np.array([[1.0, 2.0, 3.0], [7.0, 8.0, np.nan]])
    z = np.array([-1.0, 0.0, 9.99, 10.0, 29.0, 30.0, 1e4])
    got = layer_values(top, val, z)
    want = np.array([[_lookup(top[i], val[i], zz) if zz >= 0 else np.nan for zz in z] for i in range(2)])
    np.testing.assert_array_equal(got, want)
    assert got[0, 3] == 2.0 and got[1, -1] == 8.0  # top inclusive; half-space holds below


def test_stitch_at_stations_equals_models_and_masks_below_doi():
    m = synthetic_models()
    g = stitch_models(m, depth_step=5.0, max_depth=450.0, **PROFILE)
    depth = g["depth"].values
    assert g.sizes["distance"] == 5 and depth[-1] == 450.0
    full = g["log10_resistivity_full"].values
    for i in range(5):
        want = [np.log10(_lookup(m.depth_top.values[i], m.resistivity.values[i], z)) for z in depth]
        np.testing.assert_allclose(full[i], want, rtol=0, atol=1e-12)
        below = depth > DOI[i]
        np.testing.assert_array_equal(g["below_doi"].values[i], below)
        assert np.all(np.isnan(g["log10_resistivity"].values[i, below]))
        assert np.all(np.isfinite(g["log10_resistivity"].values[i, ~below]))
    # Station 3: conductor from 120 m; layer tops 5 (1.08^k - 1)/0.08 m give 121.1, 135.8,
    # 151.6 m inside [120, 160) (hand computation), so 140 m is conductive, 100 m is host.
    assert CONDUCTOR_TOPS[2] == 120.0
    assert 10 ** full[2, list(depth).index(140.0)] == pytest.approx(CONDUCTOR)
    assert 10 ** full[2, list(depth).index(100.0)] == pytest.approx(HOST)


def test_linear_and_nearest_lateral_interpolation_and_gaps():
    s = np.array([0.0, 100.0])
    top = np.array([[0.0, 50.0], [0.0, 50.0]])
    lr = np.array([[1.0, 2.0], [3.0, 0.0]])
    doi = np.array([80.0, 40.0])
    pos = np.array([-10.0, 0.0, 25.0, 50.0, 100.0, 110.0])
    depth = np.array([10.0, 60.0])
    v, below, dp = stitch_grid(s, top, lr, doi, pos, depth, "linear")
    # Linear in log10 rho: at 25 m, 0.75*1 + 0.25*3 = 1.5; DOI 0.75*80+0.25*40 = 70.
    np.testing.assert_allclose(v[2], [1.5, 1.5])
    np.testing.assert_allclose(dp[1:5], [80.0, 70.0, 60.0, 40.0])
    assert np.isnan(v[0]).all() and np.isnan(v[5]).all()  # no extrapolation
    np.testing.assert_array_equal(below[4], [False, True])
    v, _, _ = stitch_grid(s, top, lr, doi, pos, depth, "nearest")
    np.testing.assert_allclose(v[:, 0], [1.0, 1.0, 1.0, 3.0, 3.0, 3.0])  # ends hold half a spacing
    v, _, _ = stitch_grid(s, top, lr, doi, pos, depth, "linear", max_gap=50.0)
    assert np.isnan(v[2]).all() and np.isfinite(v[1]).all() and np.isfinite(v[4]).all()
    with pytest.raises(TemInputError, match="chainage"):
        stitch_grid(np.array([5.0, 5.0]), top, lr, doi, pos, depth, "linear")


def test_elevation_section_drapes_models_below_surface():
    m = synthetic_models()
    g = stitch_models(m, depth_step=2.5, max_depth=300.0, **dict(PROFILE, vertical="elevation"))
    elev = g["elevation"].values
    assert elev[0] == Z.max()
    for i in range(5):
        depth = Z[i] - elev
        want = [np.log10(_lookup(m.depth_top.values[i], m.resistivity.values[i], z)) if z >= 0 else np.nan
                for z in depth]
        np.testing.assert_allclose(g["log10_resistivity_full"].values[i], want, atol=1e-12)
        np.testing.assert_array_equal(g["below_doi"].values[i], depth > DOI[i])


def test_pseudo_section_log_log_interpolation():
    # rho_a = 100 (t/1e-4)^0.25 is linear in log-log, so interpolation is exact.
    t = np.logspace(-5, -2, 7)
    r = 100 * (t / 1e-4) ** 0.25
    axis = np.array([3e-6, 2e-5, 4e-4, 9e-3, 2e-2])
    got = pseudo_section_grid([0.0, 100.0], [t, t], [r, 2 * r], [0.0, 50.0, 100.0], axis, "linear")
    want = np.log10(100 * (axis / 1e-4) ** 0.25)
    inside = (axis >= t[0]) & (axis <= t[-1])
    np.testing.assert_allclose(got[0, inside], want[inside], atol=1e-12)
    np.testing.assert_allclose(got[1, inside], want[inside] + 0.5 * np.log10(2), atol=1e-12)
    assert np.isnan(got[:, ~inside]).all()


# ------------------------------------------------------------------ depth to time
def test_twt_two_layer_closed_form():
    h1, v1, v2 = 150.0, 2000.0, 3000.0
    z = np.array([0.0, 75.0, 150.0, 400.0, 1000.0])
    want = np.where(z <= h1, 2 * z / v1, 2 * (h1 / v1 + (z - h1) / v2))
    got = depth_to_twt(z, [0.0, h1], [v1, v2])
    np.testing.assert_allclose(got, want, rtol=1e-14)
    assert got[3] == pytest.approx(0.31666666666666665)  # 2*(150/2000 + 250/3000), by hand
    np.testing.assert_allclose(twt_to_depth(want, [0.0, h1], [v1, v2]), z, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize("depth,vel,field", [
    ([0.0, 100.0, 100.0], [1500, 2000, 2500], "depth_m"),
    ([0.0, 200.0, 100.0], [1500, 2000, 2500], "depth_m"),
    ([10.0, 200.0], [1500, 2000], "depth_m"),
    ([0.0, 100.0], [1500, 0.0], "vp_m_per_s"),
    ([0.0, 100.0], [1500, -2.0], "vp_m_per_s"),
])
def test_bad_velocity_tables(depth, vel, field):
    with pytest.raises(TemInputError, match=f"vel.csv: {field}"):
        check_velocity_table(depth, vel, "vel.csv")


# ------------------------------------------------------------------ figures
def test_section_figure_shows_doi_mask(tmp_path):
    from tem.io.figures import save_figure
    from tem.section.plot import section_figure

    m = synthetic_models()
    g = stitch_models(m, 5.0, positions=np.arange(0.0, 1001.0, 50.0), **PROFILE)
    fig = section_figure(g, below_doi="hide")
    mesh = next(a for a in fig.axes[0].collections if a.get_gid() == "resistivity")
    arr = np.ma.asarray(mesh.get_array()).reshape(g.sizes["depth"], g.sizes["distance"])
    np.testing.assert_array_equal(np.ma.getmaskarray(arr).T,
                                  g["below_doi"].values | np.isnan(g["log10_resistivity_full"].values))
    gids = {a.get_gid() for a in fig.axes[0].get_children()}
    assert {"doi-veil", "doi-line"} <= gids
    assert fig.axes[1].get_ylabel() == "resistivity (ohm-m)"
    assert fig.axes[0].yaxis_inverted()  # depth grows downward
    files = save_figure(section_figure(g, below_doi="shade"), tmp_path / "sec", ("png", "pdf"))
    assert [f.suffix for f in files] == [".png", ".pdf"]
    assert files[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and files[1].read_bytes()[:5] == b"%PDF-"


def test_model_figure_with_huge_std_does_not_overflow():
    # an unresolved layer's posterior std can be hundreds of decades (seen on a 20 s
    # Emberline recording); 10**std overflowed with a RuntimeWarning
    import warnings

    from tem.section.plot import model_figure
    m = synthetic_models()
    m["log10_res_std"].values[:, :3] = 565.0
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fig = model_figure(m)
    titles = [ax.get_title() for ax in fig.axes]
    assert [t for t in titles if t] == list(m["station"].values)


def test_line_csv_refuses_non_finite_vertex(tmp_path):
    from tem.section import read_line_csv
    p = tmp_path / "line.csv"
    p.write_text("x,y\n0,0\n1000,inf\n")
    with pytest.raises(TemInputError, match=r"line\.csv: line 3: y: must be finite"):
        read_line_csv(p)


@pytest.mark.parametrize("at", ["top", "bottom"])
def test_station_labels_never_overlap_nor_leave_the_axes(at, tmp_path):
    # Twelve stations 1 km apart whose labels are wider than a station's share of the
    # profile, and labels at both ends of it: after drawing (the layout runs at draw time,
    # once the axes have their final size) no two label boxes overlap and every box is
    # inside the axes (plain geometry of the drawn boxes; no external source needed).
    from tem.section.plot import _new_figure, label_stations

    fig = _new_figure(8, 4)
    ax = fig.add_subplot()
    ax.set_xlim(0, 11)
    ax.set_ylim(4000, 0)
    xs = np.arange(12.0)
    words = ["degenerate-layer\nchi2 0.7\nunconverged", "unconverged", "QC reoccupy"]
    labels = [(f"EM{k + 1:02d}", words[k % 3] if k != 5 else "") for k in range(12)]
    label_stations(ax, xs, labels, (0.0, 4000.0), "lab-", at=at)
    fig.colorbar(ax.pcolormesh([[1, 2]], cmap="viridis"), ax=ax, label="x (unit)")
    fig.savefig(tmp_path / "labels.png")            # draws: the labels are laid out
    renderer = fig.canvas.get_renderer()
    texts = [t for t in ax.texts if str(t.get_gid()).startswith("lab-")]
    assert len(texts) == 11
    boxes = [t.get_bbox_patch().get_window_extent(renderer) for t in texts]
    axbox = ax.get_window_extent(renderer)
    for b in boxes:
        assert axbox.x0 - 0.5 <= b.x0 and b.x1 <= axbox.x1 + 0.5
        assert axbox.y0 - 0.5 <= b.y0 and b.y1 <= axbox.y1 + 0.5
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (texts[i].get_gid(), texts[j].get_gid())
    # a second draw gives the same places (the layout starts from the anchors each time)
    first = [t.get_position() for t in texts]
    fig.savefig(tmp_path / "labels2.png")
    np.testing.assert_allclose([t.get_position() for t in texts], first, rtol=1e-3)


def test_a_misfit_doi_does_not_set_the_section_depth():
    # a dead channel's misfit model reported a DOI of 8.8 km and the default section went to
    # 22 km under a survey resolved to about 2 km: the default bottom (1.25 x the deepest DOI;
    # common practice, no source) takes the DOIs of the models that are not a misfit
    from tem.invert.verdict import CODES, STATUSES

    m = synthetic_models()
    base = stitch_models(m, depth_step=5.0, **PROFILE)
    assert float(base["depth"].values[-1]) == pytest.approx(1.25 * np.nanmax(m["doi"].values),
                                                            abs=5.0)
    codes = np.zeros(m.sizes["station"], np.int8)
    codes[0] = CODES["misfit"]
    m["verdict_code"] = ("station", codes, {"flag_values": np.arange(len(STATUSES), dtype=np.int8)})
    m["doi"].values[0] = 8800.0
    g = stitch_models(m, depth_step=5.0, **PROFILE)
    assert float(g["depth"].values[-1]) == pytest.approx(1.25 * np.nanmax(m["doi"].values[1:]),
                                                         abs=5.0)
    m["verdict_code"].values[:] = CODES["misfit"]          # all misfit: their DOIs it is
    g = stitch_models(m, depth_step=5.0, **PROFILE)
    assert float(g["depth"].values[-1]) == pytest.approx(1.25 * 8800.0, abs=5.0)
