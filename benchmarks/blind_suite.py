"""The blind suite (tests/data/blind_suite.npz) inverted with the tool's defaults
(few-layer kind): prints the table of docs/inversion.md (markdown, stdout) and one
JSON line per case and a summary line to stderr.

Run from the repository root: ``python benchmarks/blind_suite.py``. Times are CPU
seconds of one process (numba threads may use more than one core).
"""
from __future__ import annotations

import json
import sys
import time

import numpy as np


def main():
    sys.path[:0] = [".", "tests"]
    from blind_data import load
    from test_invert_blind import judge, within

    from tem.invert.data import station_data
    from tem.invert.station import InversionSettings, invert_station

    rows = []
    print("| case | offset (km) | layers (true) | chi2 | smooth chi2 | DOI (m) | depth (true) m | "
          "resistivity (true) ohm-m | 95 % range ohm-m | thickness (true) m | conductance (true) S "
          "| verdict | CPU s |")
    print("|---|---|---|---|---|---|---|---|---|---|---|---|---|")
    for c in load():
        t0 = time.process_time()
        r = invert_station(station_data(c["ds"]), InversionSettings(kind="few-layer"))
        cpu = time.process_time() - t0
        j = judge(c, r.few)
        value_ok = within(j["S"], j["S_true"]) if j["thin"] else within(j["rho"], j["rho_true"])
        ok = bool(j["chi2"] <= 1.5 and abs(j["z"] / j["z_true"] - 1) <= 0.1 and value_ok)
        rho_ok = within(j["rho"], j["rho_true"])
        verdict = "fitted" if j["chi2"] <= 1.5 else f"misfit ({j['chi2']:.2f})"
        what = "base" if c["target_is_base"] else "top"
        thk = "-" if not np.isfinite(j["h_true"]) else f"{j['h']:.0f} ({j['h_true']:.0f})"
        cond = "-" if not np.isfinite(j["h_true"]) else f"{j['S']:.3g} ({j['S_true']:.3g})"
        print(f"| {c['name']} | {c['offset'] / 1000:.1f} | {r.few['resistivity'].size} "
              f"({c['resistivity'].size}) | {j['chi2']:.2f} | {r.chi2:.2f} | {r.doi:.0f} | "
              f"{what} {j['z']:.0f} ({j['z_true']:.0f}) | {j['rho']:.3g} ({j['rho_true']:.3g})"
              f"{'' if rho_ok else ' **outside 1.5x**'} | {j['lo']:.3g}-{j['hi']:.3g} | {thk} | "
              f"{cond} | {verdict}{'' if ok else '; target missed'} | {cpu:.1f} |", flush=True)
        rows.append(dict(case=c["name"], offset=c["offset"], chi2=round(j["chi2"], 3), ok=ok,
                         rho_within_1_5=bool(rho_ok), thin=j["thin"], rho=round(j["rho"], 3),
                         rho_range=[round(j["lo"], 3), round(j["hi"], 3)], cpu_s=round(cpu, 2),
                         n_layers=int(r.few["resistivity"].size)))
        print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
    print(json.dumps({"case": "blind-suite-fewlayer-defaults", "n": len(rows),
                      "passed": sum(r["ok"] for r in rows),
                      "max_chi2": max(r["chi2"] for r in rows),
                      "cpu_s_total": round(sum(r["cpu_s"] for r in rows), 1)}), file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
