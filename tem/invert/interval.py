"""A verdict on the posterior intervals of a sampled station: converged or unconverged.

The percentiles of :mod:`tem.invert.posterior_products` (P10/P50/P90 of depths
and resistivity, the target-top interval) are only estimates of the posterior
when its Markov chains have mixed. The verdict is judged from the FINAL
diagnostics of the station's kept draws (:mod:`tem.invert.diagnostics`): the
largest rank-normalised split R-hat over the free parameters and the smallest
bulk or tail effective sample size (ESS, draws of all chains together).

``converged`` (code 0)
    largest split R-hat <= ``interval_rhat_max`` (default 1.1) and smallest
    ESS >= ``interval_ess_min`` (default 100).
``unconverged`` (code 1)
    otherwise, or when a diagnostic is not a finite number.
``unusable`` (code 2)
    the sampled few-layer model does not fit its data (its verdict is
    ``misfit`` or ``stalled``): however well the chains mixed, their spread
    is that of a model that does not explain the data (an independent check
    found misfit stations at chi2 16-119 labelled converged, with P10-P90
    missing the truth); the intervals are not to be used.

Sources of the thresholds: 1.1 is the R-hat threshold of Gelman, Carlin,
Stern, Dunson, Vehtari & Rubin (2013), "Bayesian Data Analysis", 3rd ed.,
section 11.4. Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021),
"Rank-normalization, folding, and localization: an improved R-hat for
assessing the convergence of MCMC", Bayesian Analysis 16(2), 667-718,
recommend the stricter R-hat < 1.01 and ESS > 400 before reporting
posterior summaries. Our defaults are looser on
purpose: the verdict is a field check that tells a wrong interval (chains
stuck in different places: R-hat 1.5-3, ESS below 20) from a rough one,
not a criterion for publication; P10/P90 of 100 effective draws are still
rough, and a user who needs the published criteria sets them
(``--interval-rhat-max 1.01 --interval-ess-min 400``).

An unconverged interval is a *warning*: the few-layer model still fits the
data (its own verdict, :mod:`tem.invert.verdict`, is unchanged) and the exit
status stays 0; every product that shows the intervals marks the station.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["IntervalVerdict", "INTERVAL_STATUSES", "MARKED", "interval_flag_meanings",
           "judge_interval", "interval_verdict_of", "unusable_interval"]

#: Status names in code order (code = index): the flag values of the products.
INTERVAL_STATUSES = ("converged", "unconverged", "unusable")
#: Statuses every product marks (hatched, labelled, warned).
MARKED = ("unconverged", "unusable")
#: What the user can do about an unconverged interval.
REMEDY = "run longer chains (posterior_draws/posterior_burn)"


def interval_flag_meanings() -> str:
    """CF ``flag_meanings`` text of the interval verdict codes."""
    return " ".join(INTERVAL_STATUSES)


def _num(v, digits):
    return f"{v:.{digits}f}" if math.isfinite(v) else "not finite"


def _near(v, threshold, digits):
    """``v`` with ``digits`` decimals, more while it would print as the threshold."""
    if not math.isfinite(v):
        return "not finite"
    for d in range(digits, digits + 6):
        text = f"{v:.{d}f}"
        if v == threshold or float(text) != float(threshold):
            return text
    return text


@dataclass(frozen=True)
class IntervalVerdict:
    """Verdict on one station's posterior intervals.

    Attributes
    ----------
    status : str
        ``converged`` or ``unconverged``.
    rhat, ess : float
        Largest split R-hat and smallest bulk or tail ESS of the station's draws.
    rhat_max, ess_min : float
        The thresholds they were judged against.
    why : str
        For ``unusable``: the fit verdict that makes it so, in words and numbers.
    """

    status: str
    rhat: float
    ess: float
    rhat_max: float
    ess_min: float
    why: str = ""

    def __post_init__(self):
        if self.status not in INTERVAL_STATUSES:
            raise ValueError(f"interval verdict: unknown status {self.status!r}")

    @property
    def code(self) -> int:
        """0 converged, 1 unconverged, 2 unusable."""
        return INTERVAL_STATUSES.index(self.status)

    @property
    def converged(self) -> bool:
        return self.status == "converged"

    @property
    def text(self) -> str:
        """One line in words and numbers, e.g. ``intervals unconverged: split R-hat 3.22 > 1.1,
        ESS 4 < 100; run longer chains (posterior_draws/posterior_burn)``."""
        r_ok = math.isfinite(self.rhat) and self.rhat <= self.rhat_max
        e_ok = math.isfinite(self.ess) and self.ess >= self.ess_min
        # enough digits that a number never reads as its threshold ("R-hat 1.10 > 1.1")
        parts = [f"split R-hat {_near(self.rhat, self.rhat_max, 2)} {'<=' if r_ok else '>'} "
                 f"{self.rhat_max:g}",
                 f"ESS {_near(self.ess, self.ess_min, 0)} {'>=' if e_ok else '<'} "
                 f"{self.ess_min:g}"]
        out = f"intervals {self.status}: " + ", ".join(parts)
        if self.status == "unusable":
            return (f"intervals unusable: {self.why}; the chains' spread ({', '.join(parts)}) is "
                    "that of a model that does not explain the data")
        return out if self.converged else f"{out}; {REMEDY}"

    def as_dict(self) -> dict:
        """Plain values for JSON (run.json, stage info)."""
        return {"interval_verdict": self.status, "interval_code": self.code,
                "interval_text": self.text}


def judge_interval(rhat, ess, *, rhat_max, ess_min) -> IntervalVerdict:
    """Verdict from the largest split R-hat and the smallest ESS (a pure function).

    Not-finite diagnostics (no free parameter, too few draws) are unconverged.
    """
    rhat, ess = float(rhat), float(ess)
    ok = (math.isfinite(rhat) and math.isfinite(ess) and rhat <= float(rhat_max)
          and ess >= float(ess_min))
    return IntervalVerdict("converged" if ok else "unconverged", rhat, ess, float(rhat_max),
                           float(ess_min))


def unusable_interval(interval, fit_verdict):
    """The interval verdict of a station whose sampled model does not fit its data: ``unusable``
    with the fit verdict's words (``interval`` unchanged when the model fits or is warned)."""
    status = getattr(fit_verdict, "status", None)
    if interval is None or status not in ("misfit", "stalled"):
        return interval
    from dataclasses import replace
    first = (fit_verdict.reasons or ("",))[0]
    return replace(interval, status="unusable",
                   why=f"the model is {status}" + (f" ({first})" if first else ""))


def interval_verdict_of(settings, posterior) -> IntervalVerdict:
    """:func:`judge_interval` of a :class:`tem.invert.posterior.PosteriorResult` with the
    thresholds of an :class:`InversionSettings`."""
    return judge_interval(posterior.max_rhat, posterior.min_ess,
                          rhat_max=settings.interval_rhat_max, ess_min=settings.interval_ess_min)
