"""A verdict on every model: fitted, misfit, stalled, parameter at a bound, degenerate layer.

The verdict is judged from the FINAL numbers of a model only (its chi-square
per datum, the number of data, its parameters, the bounds the optimiser
used and the optimiser's convergence flag), never from messages of an
intermediate pass, so the same model always gets the same verdict.

Statuses, most severe first (when several apply the most severe one is the
status; every finding is kept in ``reasons``):

``misfit`` (code 1)
    chi2 above the tolerance ``target * max(tolerance_factor,
    chi2.ppf(quantile, N) / N)``. If the errors are right and the model
    explains the data, N chi2 (chi2 per datum times N) is chi-square
    distributed with about N degrees of freedom, so its 95 % quantile over N
    is the misfit one in twenty correct models would exceed by chance
    (common practice, no source); the floor ``tolerance_factor`` (1.5)
    keeps a large data set from turning a 10 % misfit into a failure, since
    real errors are never known to better than that (common practice, no
    source).
``stalled`` (code 2)
    chi2 within the tolerance but more than ``stall_margin`` (20 %) above
    the target, and the optimiser stopped without converging (iteration limit, or no step reduced the
    misfit): the model is not the one the method promises (for Occam, the
    smoothest model at the target).
``parameter-at-bound`` (code 3)
    a resistivity or thickness within ``bound_margin`` (relative) of the
    bound the optimiser clipped it to: the data asked for more than the
    bounds allow, so the value is a limit, not an estimate.
``degenerate-layer`` (code 4)
    a layer below the top thinner than ``thin_fraction`` of the depth of its
    top: at that depth a diffusive field cannot resolve it (its conductance
    or resistance trades off with its neighbours), so its parameters are not
    individually meaningful (common practice, no source).
``fitted`` (code 0)
    none of the above.

``misfit`` and ``stalled`` are *failures*: a station whose chosen model has
one of them makes ``tem invert`` and ``tem run`` exit with status 1, as a
failed station does. ``parameter-at-bound`` and ``degenerate-layer`` are
*warnings*: the data are fitted, the model is marked in every product, the
exit status stays 0.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Verdict", "STATUSES", "CODES", "FAILURES", "WARNINGS", "judge", "tolerance",
           "flag_meanings", "verdict_of", "failed_stations"]

#: Status names in code order (code = index): the flag values of the products.
STATUSES = ("fitted", "misfit", "stalled", "parameter-at-bound", "degenerate-layer")
CODES = {s: i for i, s in enumerate(STATUSES)}
#: Statuses that fail a station (exit status 1): the model does not explain the data.
FAILURES = ("misfit",)
#: Statuses that mark a model but leave the exit status alone: the data are fitted
#: within the tolerance, but the optimiser stopped early (stalled), a value is a limit
#: (at a bound) or a layer is not individually resolved (degenerate).
WARNINGS = ("stalled", "parameter-at-bound", "degenerate-layer")
#: Severity order when several statuses apply (first wins).
SEVERITY = ("misfit", "stalled", "parameter-at-bound", "degenerate-layer")


def flag_meanings() -> str:
    """CF ``flag_meanings`` text (status names with underscores, space separated)."""
    return " ".join(s.replace("-", "_") for s in STATUSES)


@dataclass(frozen=True)
class Verdict:
    """Verdict on one model (see the module text for the statuses).

    Attributes
    ----------
    status : str
        One of :data:`STATUSES`.
    chi2 : float
        Final chi-square per datum of the model.
    target, tolerance : float
        Target chi2 per datum and the largest chi2 still counted as fitted.
    n_data : int
        Number of data.
    reasons : tuple of str
        Every finding in words and numbers, most severe first; the first one
        states the misfit against the tolerance.
    kind : str
        Model kind (smooth, few-layer, lci) or "".
    """

    status: str
    chi2: float
    target: float
    tolerance: float
    n_data: int
    reasons: tuple = ()
    kind: str = ""

    def __post_init__(self):
        if self.status not in STATUSES:
            raise ValueError(f"verdict: unknown status {self.status!r}")

    @property
    def code(self) -> int:
        """Integer code for headers: 0 fitted, 1 misfit, 2 stalled, 3 at bound, 4 degenerate."""
        return CODES[self.status]

    @property
    def failed(self) -> bool:
        """True for a failure (misfit): exit status 1; the others are warnings."""
        return self.status in FAILURES

    @property
    def summary(self) -> str:
        """One line: the status and its reasons, e.g. ``misfit: chi2 25.1 above tolerance ...``."""
        return f"{self.status}: " + "; ".join(self.reasons) if self.reasons else self.status

    def as_dict(self) -> dict:
        """Plain values for JSON (run.json, stage info)."""
        return {"status": self.status, "code": self.code, "chi2": _json_num(self.chi2),
                "target": self.target, "tolerance": round(self.tolerance, 4),
                "n_data": int(self.n_data), "reasons": list(self.reasons), "kind": self.kind}

    @classmethod
    def from_dict(cls, d) -> "Verdict":
        return cls(status=d["status"], chi2=float(d["chi2"]) if d.get("chi2") is not None
                   else math.nan, target=float(d["target"]), tolerance=float(d["tolerance"]),
                   n_data=int(d["n_data"]), reasons=tuple(d.get("reasons", ())),
                   kind=d.get("kind", ""))


def _json_num(v):
    v = float(v)
    return round(v, 6) if math.isfinite(v) else None


def tolerance(target: float, n_data: int, factor: float, quantile: float) -> float:
    """Largest chi2 per datum counted as fitted: ``target * max(factor, chi2.ppf(q, N) / N)``."""
    from scipy.stats import chi2 as chi2_dist

    n = max(int(n_data), 1)
    return float(target) * max(float(factor), float(chi2_dist.ppf(quantile, n)) / n)


def _g(v) -> str:
    """A number for a reason: 3 significant digits, plain or with an exponent."""
    v = float(v)
    if not math.isfinite(v):
        return str(v)
    if v != 0 and (abs(v) >= 1e5 or abs(v) < 1e-2):
        return f"{v:.3g}".replace("e+0", "e").replace("e+", "e").replace("e-0", "e-")
    return f"{v:.3g}" if abs(v) < 100 else f"{v:.0f}"


def _at_bound(values, lo, hi, margin):
    """Per value: 'upper', 'lower' or '' (within ``margin`` relative of a bound)."""
    out = []
    for v in np.asarray(values, float):
        if hi is not None and math.isfinite(hi) and v >= hi / (1 + margin):
            out.append("upper")
        elif lo is not None and math.isfinite(lo) and v <= lo * (1 + margin):
            out.append("lower")
        else:
            out.append("")
    return out


def judge(chi2, n_data, *, target, converged, resistivity, thickness=None,
          resistivity_bounds=None, thickness_bounds=None, tolerance_factor, quantile,
          bound_margin, thin_fraction, stall_margin, kind="", fixed=()) -> Verdict:
    """Verdict on a final model from its final numbers (a pure function).

    Parameters
    ----------
    chi2 : float
        Final chi-square per datum.
    n_data : int
        Number of data.
    target : float
        Target chi2 per datum.
    converged : bool
        The optimiser's own convergence flag for this final model.
    resistivity : array (L,), ohm-m
        Layer resistivities, top to half-space.
    thickness : array (L-1,), m, or None
        Layer thicknesses of a few-layer model; None for a fixed mesh (smooth
        and laterally constrained models: the degenerate-layer test and the
        thickness bounds do not apply).
    resistivity_bounds, thickness_bounds : (lower, upper) or None
        Bounds the optimiser clipped the parameters to.
    tolerance_factor, quantile : float
        See :func:`tolerance`.
    bound_margin : float
        Relative distance from a bound counted as "at" it.
    stall_margin : float
        An unconverged fit is stalled when chi2 exceeds the target by more
        than this fraction.
    thin_fraction : float
        A layer below the top thinner than this fraction of its top's depth is degenerate.
    kind : str
        Model kind, kept in the verdict.
    fixed : iterable of (str, int)
        Parameters the user fixed, ``("resistivity", k)`` or ``("thickness", k)``:
        not judged against bounds.
    """
    chi2 = float(chi2)
    n = int(n_data)
    tol = tolerance(target, n, tolerance_factor, quantile)
    fixed = set(tuple(f) for f in fixed)
    found = {s: [] for s in SEVERITY}
    data = f"(target {_g(target)}, {n} data)"
    if not math.isfinite(chi2) or chi2 > tol:
        first = f"chi2 {_g(chi2)} above tolerance {tol:.2f} {data}"
        found["misfit"].append(first)
    else:
        first = f"chi2 {_g(chi2)} within tolerance {tol:.2f} {data}"
        if not converged and chi2 > target * (1 + stall_margin):
            found["stalled"].append(f"optimiser stopped before convergence at chi2 {_g(chi2)} "
                                    f"above target {_g(target)}")
    rho = np.asarray(resistivity, float)
    lo, hi = resistivity_bounds if resistivity_bounds is not None else (None, None)
    for k, side in enumerate(_at_bound(rho, lo, hi, bound_margin)):
        if side and ("resistivity", k) not in fixed:
            found["parameter-at-bound"].append(
                f"layer {k + 1} resistivity {_g(rho[k])} ohm-m at the {side} bound")
    if thickness is not None:
        h = np.asarray(thickness, float)
        lo, hi = thickness_bounds if thickness_bounds is not None else (None, None)
        for k, side in enumerate(_at_bound(h, lo, hi, bound_margin)):
            if side and ("thickness", k) not in fixed:
                found["parameter-at-bound"].append(
                    f"layer {k + 1} thickness {_g(h[k])} m at the {side} bound")
        top = np.concatenate([[0.0], np.cumsum(h)])[:-1]
        for k in range(1, h.size):
            if h[k] < thin_fraction * top[k]:
                found["degenerate-layer"].append(
                    f"layer {k + 1} thickness {_g(h[k])} m is < {100 * thin_fraction:g} % of its "
                    f"depth {_g(top[k])} m")
    status = next((s for s in SEVERITY if found[s]), "fitted")
    reasons = [first] + [r for s in SEVERITY for r in found[s] if r != first]
    return Verdict(status=status, chi2=chi2, target=float(target), tolerance=tol, n_data=n,
                   reasons=tuple(reasons), kind=kind)


def verdict_of(settings, chi2, n_data, converged, resistivity, thickness=None,
               resistivity_bounds=None, thickness_bounds=None, kind="", fixed=()) -> Verdict:
    """:func:`judge` with the tolerances of an :class:`InversionSettings`."""
    return judge(chi2, n_data, target=settings.target, converged=converged,
                 resistivity=resistivity, thickness=thickness,
                 resistivity_bounds=resistivity_bounds, thickness_bounds=thickness_bounds,
                 tolerance_factor=settings.verdict_tolerance, quantile=settings.verdict_quantile,
                 bound_margin=settings.verdict_bound_margin,
                 thin_fraction=settings.verdict_thin_fraction,
                 stall_margin=settings.verdict_stall_margin, kind=kind, fixed=fixed)


def failed_stations(verdicts) -> list:
    """Station ids whose verdict is a failure, from ``{station: Verdict or dict}``."""
    out = []
    for sid, v in verdicts.items():
        status = v.status if isinstance(v, Verdict) else (v or {}).get("status")
        if status in FAILURES:
            out.append(sid)
    return out
