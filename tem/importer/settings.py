"""Settings of the import stage: one table, the source of ImportSettings and the ``tem import``
options."""
from __future__ import annotations

from ..settings import Setting, SettingsTable

__all__ = ["IMPORT", "ImportSettings"]

IMPORT = SettingsTable("import", [
    Setting("snr_min", 0.0, "float", "", minimum=0, maximum=1e6,
            help="gates with |value| below this many standard errors are marked not usable "
                 "(0: keep the file's own usable flags only)",
            source="common practice, no source"),
], "ImportSettings", doc="Import of stacked decays from other systems.")

ImportSettings = IMPORT.cls
