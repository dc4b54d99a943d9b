"""The import stage's one door: decay CSV + system TOML -> ``gated/<station>.nc``.

``tem import`` calls :func:`run`. The products are gated soundings of
format 1.2 (docs/data-model.md) that ``tem rhoa``, ``tem invert`` and the
later stages read like those of ``tem gate``.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import input_error
from ..io.project import Project
from ..provenance import file_sha256, stage_record
from ..runtime import StageContext, StageResult, StationOutcome
from .settings import ImportSettings

__all__ = ["run", "read_inputs"]


def read_inputs(decays_file, system_file, settings: ImportSettings):
    """``{station: gated Dataset}`` of a decay CSV and a system TOML (raises TemInputError)."""
    from .build import station_datasets
    from .csvfile import read_decays
    from .system import read_system

    system = read_system(system_file)
    decays = read_decays(decays_file)
    if decays.raw and system.normalised:
        raise input_error("unit", "receiver volts (V), but the system file says "
                          "receiver.normalised = true", decays_file)
    if not decays.raw and not system.normalised:
        raise input_error("receiver.normalised", "false, but the decays are in normalised units "
                          f"({', '.join(sorted(set(decays.units.values())))})", system_file)
    record = stage_record("import", dict(settings.as_dict(), sampling=decays.sampling,
                                         units=decays.units, waveform=system.waveform["kind"],
                                         normalised=system.normalised),
                          inputs=[decays_file, system_file])
    datasets = station_datasets(decays, system, [record], settings.snr_min)
    # what the later stages will read is checked as they will check it, before anything is
    # written: a value the inputs allowed but a gated file does not (a coordinate or
    # current beyond the physical limits, a time that rounds to 0) is refused here
    from ..io.schema import check_product
    for sid, ds in datasets.items():
        check_product(ds, "gated", f"{Path(decays_file).name} with {Path(system_file).name}, "
                                   f"station {sid}")
    return datasets


def run(settings: ImportSettings, inputs, out, ctx: StageContext = StageContext()) -> StageResult:
    """Import ``inputs = (decays_csv, system_toml)`` into ``OUT/gated/<station>.nc``.

    Every input is checked before anything is written: a bad file raises
    :class:`tem.errors.TemInputError` (one line naming file and field).
    """
    from ..io.stacked import write_dataset

    decays_file, system_file = map(Path, inputs)
    project = out if isinstance(out, Project) else Project(out)
    datasets = read_inputs(decays_file, system_file, settings)
    used = [{"file": str(f), "sha256": file_sha256(f)} for f in (decays_file, system_file)]
    res = StageResult(inputs=used)
    for sid, ds in datasets.items():
        path = write_dataset(ds, project.station_file("gated", sid))
        n_use = int(np.asarray(ds["usable"].values).sum())
        # a station whose every gate is flagged is bad input (exit 2, naming the decay file);
        # its sounding is still written, as the file gave it
        why = "every row flagged not usable" + (f" or below --snr-min {settings.snr_min:g}"
                                                if settings.snr_min else "")
        oc = StationOutcome(sid, "ok" if n_use else "failed",
                            "" if n_use else f"{decays_file}: usable: station {sid}: no usable "
                            f"gate ({why})", outputs=[str(path)], inputs=used,
                            info={"usable_gates": n_use, "gates": int(ds["usable"].size)},
                            bad_input=not n_use)
        res.stations[sid] = oc
        if ctx.progress:
            ctx.progress(sid, oc.status)
    return res
