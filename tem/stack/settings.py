"""Settings of the stack stage: one table, the source of StackSettings, ``tem stack`` options
and the ``[processing.stack]`` keys."""
from __future__ import annotations

from ..settings import Setting, SettingsTable

__all__ = ["ESTIMATORS", "STACK", "StackSettings"]

ESTIMATORS = ("huber", "mean", "median", "trimmed")


def _reject_above_huber(v):
    if not v["reject_sigma"] > v["huber_k"]:
        return "reject_sigma", f"must exceed huber_k ({v['huber_k']:g}), got {v['reject_sigma']:g}"
    return None


STACK = SettingsTable("stack", [
    Setting("estimator", "huber", "choice", choices=ESTIMATORS,
            help="location estimator across transients"),
    Setting("huber_k", 1.5, "float", "sigma", minimum=0, exclusive=True,
            help="Huber clipping constant in robust sigmas",
            source="Huber (1964), Ann. Math. Statist. 35, 73-101: 96 % efficiency at k = 1.5"),
    Setting("trim", 0.1, "float", minimum=0, maximum=0.5, exclusive_max=True,
            help="fraction trimmed at each end by the trimmed estimator"),
    Setting("reject_sigma", 6.0, "float", "sigma", minimum=0, exclusive=True,
            help="a sample estimate farther than this from the robust start is rejected",
            source="common practice, no source"),
    Setting("transient_rms", 2.5, "float", "sigma", minimum=0, exclusive=True,
            help="a transient whose rms normalised residual exceeds this is rejected as noisy",
            source="common practice, no source"),
    Setting("bad_fraction", 0.2, "float", minimum=0, maximum=1,
            help="a transient with more than this fraction of rejected samples is rejected whole",
            source="common practice, no source"),
    Setting("batches", 128, "int", minimum=4,
            help="largest number of batches for the error estimate (a shorter record gets one "
            "per three-window estimate; their correlation is corrected, docs/stacking.md "
            "section 5)", source="Monte Carlo with the Emberline noise, docs/stacking.md"),
    Setting("detrend", True, "bool", help="remove the period-mean baseline before combining"),
    Setting("mains_removal", "auto", "choice", choices=("auto", "off"),
            help="find mains off its nominal frequency on the record and remove it before a "
            "second stack (auto), or leave all mains to the stack's nulls (off)",
            source="docs/stacking.md section 6"),
    Setting("timing", None, "choice", choices=("survey", "current"),
            help="switch times from the survey schedule or the current channel (unset: as the "
            "survey says)"),
    Setting("chunk_bytes", 64 << 20, "int", "byte", minimum=1, expose=False,
            help="size of one memory-mapped chunk of windows stacked in one compiled pass"),
    Setting("start_estimates", 256, "int", minimum=8, expose=False,
            help="estimates (spread over all batches) that feed the robust start"),
    Setting("threads", 1, "int", minimum=1, maximum=256, expose=False,
            help="batches stacked concurrently (results are the same for any number)"),
], "StackSettings", doc="Stacking parameters (all explicit, no globals).",
    checks=[_reject_above_huber])

StackSettings = STACK.cls
