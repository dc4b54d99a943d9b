"""Settings of the inversion stage: one table, the source of InversionSettings, ``tem invert``
options and the ``[processing.invert]`` keys."""
from __future__ import annotations

from ..errors import input_error
from ..settings import Setting, SettingsTable

__all__ = ["INVERT", "InversionSettings", "parse_prior", "parse_floor"]

#: Components a per-component error floor may name (data channels of a gated file).
FLOOR_COMPONENTS = ("ex", "ey", "bz", "dbxdt", "dbydt", "dbzdt")


def parse_floor(value):
    """A relative error floor: one number in [0, 1) or ``{component: floor}``.

    Text is ``"0.03"`` or ``"ex=0.05,dbzdt=0.03"`` (components not named keep
    the default floor of :func:`tem.invert.data.parse_floors`).
    """
    if isinstance(value, str):
        text = value.strip()
        if "=" in text:
            out = {}
            for part in text.split(","):
                k, _, v = part.partition("=")
                if not k.strip():
                    raise ValueError(f"an entry names no component: {text[:40]!r}")
                if k.strip() in out:
                    raise ValueError(f"{k.strip()[:20]} given twice")
                out[k.strip()] = v.strip()
            value = out
        else:
            value = text
    if isinstance(value, dict):
        out = {}
        for comp, v in value.items():
            if comp not in FLOOR_COMPONENTS:
                raise ValueError(f"unknown component {str(comp)[:20]!r}; valid: "
                                 f"{', '.join(FLOOR_COMPONENTS)}")
            out[str(comp)] = _floor_value(v, comp)
        if not out:
            raise ValueError("empty table")
        return out
    return _floor_value(value)


def _floor_value(v, comp=None):
    where = f"{comp}: " if comp else ""
    if isinstance(v, str):
        try:
            v = float(v)
        except ValueError:
            raise ValueError(f"{where}not a number: {v.strip()[:20]!r}") from None
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not 0 <= float(v) < 1:
        raise ValueError(f"{where}relative floor must be in [0, 1), got {str(v)[:20]}")
    return float(v)


def parse_prior(value):
    """Few-layer priors from ``KIND:LAYER=VALUE[/STD]`` texts (a list, or one text).

    KIND is resistivity, thickness or depth; layers count from 0 at the top;
    STD is relative (ln) for resistivity and thickness and in metres for
    depth; no STD fixes the parameter. Returns a tuple of
    :class:`tem.invert.fewlayer.Prior`.
    """
    from .fewlayer import Prior

    if isinstance(value, str):
        value = [value]
    if isinstance(value, tuple) and all(isinstance(p, Prior) for p in value):
        return value
    if not isinstance(value, (list, tuple)):
        raise ValueError("expected KIND:LAYER=VALUE[/STD] texts")
    out = []
    for spec in value:
        if isinstance(spec, Prior):
            out.append(spec)
            continue
        if not isinstance(spec, str):
            raise ValueError(f"expected KIND:LAYER=VALUE[/STD], got {str(spec)[:30]!r}")
        head, eq, val = spec.partition("=")
        kind, colon, layer = head.partition(":")
        number, _, std = val.partition("/")
        if not eq or not colon:
            raise ValueError(f"expected KIND:LAYER=VALUE[/STD], got {spec[:30]!r}")
        try:
            n = int(layer)
            v, s = float(number), (float(std) if std.strip() else None)
        except ValueError:
            raise ValueError(f"{spec[:30]!r}: layer must be a whole number and value/std "
                             "numbers") from None
        if not 0 <= n <= 50:
            raise ValueError(f"{spec[:30]!r}: layer must be 0..50")
        out.append(Prior(kind.strip(), n, v, s))
    return tuple(out)


def _consistent(v):
    rho, thk = v["start_resistivity"], v["start_thickness"]
    if (rho is None) != (thk is None):
        return ("start_thickness" if thk is None else "start_resistivity",
                "give both start_resistivity and start_thickness")
    if rho is not None:
        if len(rho) != len(thk) + 1:
            return "start_thickness", (f"needs one value fewer than start_resistivity "
                                       f"({len(rho)}), got {len(thk)}")
        if not 2 <= len(rho) <= 7:
            return "start_resistivity", f"needs 2..7 layers (half-space included), got {len(rho)}"
    if v["doi_method"] == "shallower" and v["doi_threshold"] is not None:
        return "doi_threshold", "set doi_method to sensitivity or two-reference to give a threshold"
    n = len(rho) if rho is not None else v["few_layers"]
    if v["priors"] and n is None:
        return "priors", "give few_layers too (the layer count the priors refer to)"
    for p in v["priors"]:
        if p.layer > n - (1 if p.kind == "resistivity" else 2) or (p.kind == "depth" and p.layer < 1):
            return "priors", (f"{p.kind}:{p.layer}: no such layer in a {n}-layer model "
                              "(layers count from 0 at the top; depth from layer 1)")
    for name in ("few_resistivity_bounds", "few_thickness_bounds"):
        b = v[name]
        if len(b) != 2:
            return name, f"needs two numbers (lower, upper), got {len(b)}"
        if not b[0] < b[1]:
            return name, f"lower {b[0]:g} must be below upper {b[1]:g}"
    if v["depth_min"] is not None and v["depth_max"] is not None \
            and not v["depth_min"] < v["depth_max"]:
        return "depth_max", f"must exceed depth_min ({v['depth_min']:g} m)"
    return None


INVERT = SettingsTable("invert", [
    Setting("kind", "smooth", "choice", choices=("smooth", "few-layer", "posterior"),
            help="model written to models.nc: the smooth (Occam) model, the few-layer model, or "
            "the few-layer model with posterior sampling (depth and resistivity intervals)"),
    Setting("layers", 30, "int", minimum=2, maximum=200,
            help="smooth-mesh layers, half-space included"),
    Setting("depth_min", None, "float", "m", minimum=0, exclusive=True, maximum=1e5,
            help="first smooth layer thickness (unset: depth_min_factor x diffusion depth)"),
    Setting("depth_max", None, "float", "m", minimum=0, exclusive=True, maximum=1e6,
            help="top of the mesh half-space (unset: depth_max_factor x diffusion depth)"),
    Setting("depth_min_factor", 0.02, "float", minimum=0, exclusive=True, maximum=1,
            help="first layer thickness as a fraction of the diffusion depth at the earliest "
            "usable gate", source="chosen so a 20 m top layer and a 5-10 km target fit one mesh; "
            "no source"),
    Setting("depth_max_factor", 0.3, "float", minimum=0, exclusive=True, maximum=10,
            help="mesh half-space top as a fraction of the diffusion depth at the latest usable "
            "gate", source="no source"),
    Setting("offset_factor", 1.5, "float", minimum=0, maximum=100,
            help="the mesh reaches at least this many transmitter-receiver offsets",
            source="rule of thumb, no source"),
    Setting("floor", 0.03, "custom", parse=parse_floor, metavar="FLOOR",
            help="relative error floor: one number, or per component, e.g. ex=0.05,dbzdt=0.03",
            source="common practice, no source"),
    Setting("target", 1.0, "float", minimum=0, exclusive=True, maximum=1e6,
            help="target chi-square per datum"),
    Setting("max_iter", 60, "int", minimum=1, maximum=1000, help="Occam iterations"),
    Setting("misfit_drop", 0.8, "float", minimum=0, maximum=1, exclusive_max=True,
            help="each Occam step aims at this fraction of the current misfit (the smoothest "
            "model reaching it; 0: the target at once)",
            source="0.3 let the Emberline demo's EM10/EM11 models roughen early into local minima "
            "at chi2 2-3.5; 0.7-0.85 fit them at chi2 <= 1.1 (docs/inversion.md); calibrated on "
            "the demo, no source"),
    Setting("regularisation", "smooth", "choice", choices=("smooth", "focusing"),
            help="smooth-mesh and LCI regularisation: smooth (first differences of log "
            "resistivity) or focusing (minimum gradient support: sharp boundaries)"),
    Setting("focusing_parameter", 0.2, "float", minimum=0, exclusive=True, maximum=10,
            help="focusing: the ln-resistivity jump between neighbouring layers above which a "
            "boundary costs little (smaller: sharper models)",
            source="calibrated on the Emberline profile (docs/inversion.md), no source"),
    Setting("ref_resistivity", None, "float", "ohm-m", minimum=0, exclusive=True, maximum=1e9,
            help="uniform reference model (unset: the best half-space)"),
    Setting("ref_weight", 0.01, "float", minimum=0, maximum=1e6,
            help="weight of the reference-model term relative to the roughness (0: off)",
            source="keeps layers the data barely see from running away; common practice, no "
            "source"),
    Setting("doi_method", "shallower", "choice", choices=("sensitivity", "two-reference",
                                                          "shallower"),
            help="depth of investigation from cumulative sensitivity, two reference models, or "
            "the shallower of the two",
            source="the shallower of the two was the only choice honest on the empymod suite and "
            "the demo day (docs/inversion.md); calibrated, no source"),
    Setting("doi_threshold", None, "float", minimum=0, exclusive=True, maximum=1,
            exclusive_max=True,
            help="cumulative-sensitivity threshold or two-reference cut-off (unset: the "
            "method's default, 0.8 and 0.2; with shallower both defaults)"),
    Setting("few_layers", None, "int", minimum=2, maximum=7,
            help="layers of the few-layer model, half-space included (unset: the count up to "
            "few_layers_max with the lowest few_criterion)"),
    Setting("few_layers_max", 5, "int", minimum=2, maximum=7,
            help="largest few-layer count searched when few_layers is unset",
            source="no source; the blind suite needs at most 4"),
    Setting("few_criterion", "bic", "choice", choices=("bic", "aic"),
            help="information criterion choosing the few-layer count: bic (Schwarz 1978) or "
            "aic (Akaike 1974)"),
    Setting("few_search", "global", "choice", choices=("global", "local"),
            help="few-layer search: global (starts from the smooth model, differential "
            "evolution, Levenberg-Marquardt polish) or local (Levenberg-Marquardt from the "
            "starts only)"),
    Setting("few_population", 8, "int", minimum=1, maximum=100,
            help="differential evolution population per free parameter",
            source="calibrated on the blind suite (docs/inversion.md); no source"),
    Setting("few_evaluations", 2000, "int", minimum=0, maximum=1000000,
            help="largest number of forward evaluations of the population search per layer "
            "count (0: no population search)",
            source="calibrated on the blind suite (docs/inversion.md); no source"),
    Setting("few_seed", 0, "int", minimum=0, maximum=2**31 - 1,
            help="seed of the population search (same seed, same model)"),
    Setting("start_resistivity", None, "floats", "ohm-m", minimum=0, exclusive=True, maximum=1e9,
            help="few-layer starting resistivities, top to half-space (unset: from the smooth "
            "model)"),
    Setting("start_thickness", None, "floats", "m", minimum=0, exclusive=True, maximum=1e5,
            help="few-layer starting thicknesses, top down"),
    Setting("priors", (), "custom", parse=parse_prior, flag="--prior", repeat=True,
            metavar="KIND:LAYER=VALUE[/STD]",
            help="few-layer prior or fixed value (no /STD); KIND resistivity, thickness or depth; "
            "layers count from 0 at the top; STD relative (ln) for resistivity and thickness, m "
            "for depth; e.g. depth:2=1350/50; repeatable"),
    Setting("few_resistivity_bounds", (0.1, 1e5), "floats", "ohm-m", minimum=0, exclusive=True,
            maximum=1e9, metavar="LOWER,UPPER",
            help="few-layer fit: bounds of every layer resistivity (a value at a bound is flagged)"),
    Setting("few_thickness_bounds", (1.0, 2e4), "floats", "m", minimum=0, exclusive=True,
            maximum=1e6, metavar="LOWER,UPPER",
            help="few-layer fit: bounds of every layer thickness (a value at a bound is flagged)"),
    Setting("few_equivalence_delta", 3.84, "float", minimum=0, maximum=1e6,
            help="few-layer fit: each layer's resistivity range is where a chi2 profile (the "
            "other parameters re-fitted) stays within this rise of the total misfit N x chi2 "
            "(0: no ranges)",
            source="95 % profile-likelihood interval of one parameter (Press et al. 2007, "
            "Numerical Recipes, 3rd ed., sec. 15.6), from memory"),
    Setting("verdict_tolerance", 1.5, "float", minimum=1, maximum=1e9,
            help="a model is fitted when chi2 <= target x max(this, chi-square quantile / N)",
            source="errors are rarely known to better than 50 % in variance; common practice, "
            "no source"),
    Setting("verdict_quantile", 0.95, "float", minimum=0.5, maximum=1, exclusive_max=True,
            help="quantile of the chi-square distribution with N degrees of freedom in the "
            "fitted tolerance", source="95 % quantile, common practice, no source"),
    Setting("verdict_stall_margin", 0.2, "float", minimum=0, maximum=1e9,
            help="an optimiser that stopped without converging is stalled when chi2 exceeds the "
            "target by more than this fraction", source="the smooth inversion's own 'target "
            "missed' threshold (1.2 x target); no source"),
    Setting("verdict_bound_margin", 0.01, "float", minimum=0, maximum=1,
            help="a parameter within this relative distance of its bound is at the bound",
            source="common practice, no source"),
    Setting("verdict_thin_fraction", 0.05, "float", minimum=0, maximum=1,
            help="a few-layer layer thinner than this fraction of the depth of its top is "
            "degenerate (not resolvable)", source="common practice, no source"),
    Setting("posterior_draws", 2000, "int", minimum=50, maximum=10 ** 6,
            help="posterior sampling (kind posterior): kept draws per chain"),
    Setting("posterior_burn", 2000, "int", minimum=50, maximum=10 ** 6,
            help="posterior sampling: burn-in (adaptation) steps per chain, discarded"),
    Setting("posterior_chains", 4, "int", minimum=2, maximum=64,
            help="posterior sampling: independent chains (split R-hat needs two or more)"),
    Setting("posterior_seed", 0, "int", minimum=0, maximum=2 ** 63 - 1,
            help="posterior sampling: random seed (same seed, same draws)"),
    Setting("posterior_anneal", 0.0, "float", minimum=0, maximum=0.45,
            help="posterior sampling: fraction of the burn-in spent annealing from a tempered "
            "likelihood, so chains can leave a poor few-layer fit (0: off)"),
    Setting("posterior_restarts", 12, "int", minimum=0, maximum=1000,
            help="posterior sampling: extra few-layer fits from perturbed starts when the fit's "
            "chi2 per datum exceeds 1.5; the best starts the chains (0: off)"),
    Setting("interval_rhat_max", 1.1, "float", minimum=1, maximum=1e9,
            help="posterior intervals are converged when the largest split R-hat is at most "
            "this (and the ESS at least interval_ess_min); otherwise marked unconverged",
            source="Gelman et al. 2013, Bayesian Data Analysis, 3rd ed., sec. 11.4; looser than "
            "the 1.01 of Vehtari et al. 2021 (a field check, not a publication criterion)"),
    Setting("interval_ess_min", 100.0, "float", minimum=0, maximum=1e9,
            help="posterior intervals are converged when the smallest bulk or tail effective "
            "sample size (draws of all chains) is at least this",
            source="looser than the 400 of Vehtari et al. 2021, Bayesian Analysis 16(2) (a field "
            "check, not a publication criterion)"),
    Setting("cover_layers", 1, "int", minimum=0, maximum=6,
            help="layers of cover from the top; the target is the most conductive layer below "
            "them (posterior products)"),
    Setting("posterior_cells", 200, "int", minimum=10, maximum=5000,
            help="depth cells of the posterior products (resistivity percentiles and "
            "interface probability versus depth)"),
    Setting("lci", False, "bool",
            help="also invert the whole profile jointly (laterally constrained, models_lci.nc)"),
    Setting("lateral_weight", 1.0, "float", minimum=0, exclusive=True, maximum=1e6,
            help="laterally constrained inversion: lateral against vertical roughness weight"),
    Setting("lm_max_iter", 50, "int", minimum=1, maximum=1000, expose=False,
            help="Levenberg-Marquardt iterations of the few-layer fit"),
], "InversionSettings", doc="Settings of a station inversion (all explicit; no module globals).",
    checks=[_consistent])

InversionSettings = INVERT.cls


def floors_of(settings) -> dict:
    """Error floor per component from ``settings.floor``."""
    from .data import parse_floors

    try:
        return parse_floors(settings.floor)
    except ValueError as exc:  # pragma: no cover - checked by the table
        raise input_error("floor", str(exc)) from None
