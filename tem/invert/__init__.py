"""1D inversion of gated soundings: smooth (Occam), few-layer (Levenberg-Marquardt),
laterally constrained (LCI), depth of investigation and linearised uncertainty.

The algorithm modules (:mod:`.smooth`, :mod:`.fewlayer`, :mod:`.doi`, :mod:`.lci`)
work on generic forward callables; :mod:`.data` and :mod:`.station` connect
them to gated-sounding files and :class:`tem.forward.Simulation`;
:mod:`.verdict` judges every final model (fitted, misfit, stalled, parameter
at a bound, degenerate layer).
"""
