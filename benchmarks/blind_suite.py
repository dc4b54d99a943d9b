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



def main():
    sys.path[:0] = [".", "tests"]
    from blind_data import load
    from test_invert_blind import judge

    from tem.invert.data import station_data
    from tem.invert.station import InversionSettings, invert_station

    rows = []
    print("| case | offset (km) | layers (true) | chi2 | smooth chi2 | DOI (m) | depth (true) m | "
          "resistivity or conductance (true) | verdict | CPU s |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for c in load():
        t0 = time.process_time()
        r = invert_station(station_data(c["ds"]), InversionSettings(kind="few-layer"))
        cpu = time.process_time() - t0
        chi2, z, zt, v, vt, kind = judge(c, r.few)
        ok = bool(chi2 <= 1.5 and abs(z / zt - 1) <= 0.1 and 1 / 1.5 <= v / vt <= 1.5)
        verdict = "fitted" if chi2 <= 1.5 else f"misfit ({chi2:.2f})"
        what = "base" if c["target_is_base"] else "top"
        print(f"| {c['name']} | {c['offset'] / 1000:.1f} | {r.few['resistivity'].size} "
              f"({c['resistivity'].size}) | {chi2:.2f} | {r.chi2:.2f} | {r.doi:.0f} | "
              f"{what} {z:.0f} ({zt:.0f}) | {v:.3g} ({vt:.3g}) {kind} | {verdict}"
              f"{'' if ok else '; target missed'} | {cpu:.1f} |", flush=True)
        rows.append(dict(case=c["name"], offset=c["offset"], chi2=round(chi2, 3), ok=ok,
                         cpu_s=round(cpu, 2), n_layers=int(r.few["resistivity"].size)))
        print(json.dumps(rows[-1]), file=sys.stderr, flush=True)
    print(json.dumps({"case": "blind-suite-fewlayer-defaults", "n": len(rows),
                      "passed": sum(r["ok"] for r in rows),
                      "max_chi2": max(r["chi2"] for r in rows),
                      "cpu_s_total": round(sum(r["cpu_s"] for r in rows), 1)}), file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
