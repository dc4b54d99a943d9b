"""Two small gated soundings of the synthetic Emberline station (fictional) for CLI tests.

Stations E0 and E1 at 500 m and 2500 m, Ex and dBz/dt, 10 gates per decade from
2 ms to 0.8 s, 3 % noise (tem.invert.synthetic; the forward engine, not data).
"""
from __future__ import annotations

from tem.invert.synthetic import emberline_gates, emberline_station, gated_dataset


def write_two_stations(folder):
    """Write ``E0.nc`` and ``E1.nc`` into ``folder``; return (gates, values, errors) of E1."""
    gates = emberline_gates(10, 2e-3, 0.8)
    for i, x in enumerate([500.0, 2500.0]):
        v, e, _, _ = emberline_station(x, noise=0.03, seed=10 + i, gates=gates)
        gated_dataset(f"E{i}", x, 0.0, v, e, ["ex", "dbzdt"], gates).to_netcdf(
            folder / f"E{i}.nc", engine="h5netcdf")
    return gates, v, e
