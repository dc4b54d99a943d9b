"""A small synthetic models Dataset for section and export tests.

Five stations along a bent line (two straight legs), 30 layers each of
thickness growing geometrically from 5 m, a 100 ohm-m host with a 5 ohm-m
conductor 40 m thick whose top deepens from 60 m to 180 m along the line, a
DOI that shallows over the conductor's deep end, and posterior standard
deviations that grow with depth. The numbers are invented (Emberline Plateau,
fictional survey); no inversion is involved.
"""
from __future__ import annotations

from html.parser import HTMLParser

import numpy as np

from tem.io.models import models_dataset

N_STATIONS = 5
N_LAYERS = 30
CONDUCTOR_TOPS = np.array([60.0, 90.0, 120.0, 150.0, 180.0])  # m
HOST, CONDUCTOR = 100.0, 5.0  # ohm-m
# Stations: three on an east-going leg, two on a north-east leg (m, UTM-like).
_D = 250.0 / np.sqrt(2.0)  # 250 m steps at 45 degrees on the second leg
X = np.array([512000.0, 512250.0, 512500.0, 512500.0 + _D, 512500.0 + 2 * _D])
Y = np.array([7421000.0, 7421000.0, 7421000.0, 7421000.0 + _D, 7421000.0 + 2 * _D])
Z = np.array([1210.0, 1215.5, 1222.0, 1218.0, 1209.25])
DOI = np.array([400.0, 380.0, 350.0, 330.0, 300.0])


def layer_thickness():
    """30 thicknesses (m), the last NaN (half-space): 5 m growing by 8 % per layer."""
    h = 5.0 * 1.08 ** np.arange(N_LAYERS)
    h[-1] = np.nan
    return h


def synthetic_models(epsg=32735):
    h = layer_thickness()
    top = np.concatenate([[0.0], np.cumsum(h[:-1])])
    res = np.full((N_STATIONS, N_LAYERS), HOST)
    for i, zc in enumerate(CONDUCTOR_TOPS):
        res[i, (top >= zc) & (top < zc + 40.0)] = CONDUCTOR
    std = np.tile(0.02 + 0.5 * top / top[-1], (N_STATIONS, 1))
    return models_dataset(
        station=[f"EP-{k:02d}" for k in range(1, N_STATIONS + 1)],
        resistivity=res,
        thickness=np.tile(h, (N_STATIONS, 1)),
        x=X, y=Y, z=Z, doi=DOI,
        chi2=np.array([0.95, 1.1, 1.02, 1.4, 0.88]),
        log10_res_std=std, model_kind="smooth", epsg=epsg,
    )


def layer_lookup(top, values, z):
    """Independent layer lookup: value of the last layer whose top <= z."""
    out = np.nan
    for t, v in zip(top, values):
        if np.isfinite(t) and np.isfinite(v) and t <= z:
            out = v
    return out


class LinkCollector(HTMLParser):
    """Files an HTML page refers to (img src, non-anchor a href) and its table rows."""

    def __init__(self):
        super().__init__()
        self.links, self.rows = [], 0

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.links.append(a["src"])
        if tag == "a" and not a.get("href", "#").startswith("#"):
            self.links.append(a["href"])
        if tag == "tr":
            self.rows += 1
