#!/usr/bin/env python3
"""The accuracy bench's measuring half: watches a running demo (its API) while it runs, then compares every
finished load step with the simulator's answer key (`oedolog demo --truth FILE`).

Usage: accuracy.py BASE_URL TRUTH_FILE SECONDS [--json OUT]

While the demo runs it samples GET /api/frames every half second and keeps, per load step, the board's ETA
of `ready` (watch.ready_eta_us) with the daemon's clock at that moment (the newest reading's stamp). At the
end it reads every test's reduction (GET /api/tests/ID/compression) and each step's analysis (for the
method the daemon trusts) and prints the distributions the reductions issue asks for. Standard library only.
"""

import json
import statistics
import sys
import time
import urllib.request
from datetime import datetime


def get(base, path):
    with urllib.request.urlopen(base + path, timeout=30) as r:
        return json.loads(r.read())


def stamp_us(text):
    if text is None:
        return None
    return int(datetime.fromisoformat(text.replace("Z", "+00:00")).timestamp() * 1e6)


def pct(values, q):
    if not values:
        return None
    values = sorted(values)
    k = (len(values) - 1) * q
    lo, hi = int(k), min(int(k) + 1, len(values) - 1)
    return values[lo] + (values[hi] - values[lo]) * (k - lo)


def fmt(v, digits=3):
    return "—" if v is None else f"{v:.{digits}g}"


def main():
    base, truth_path, seconds = sys.argv[1].rstrip("/"), sys.argv[2], float(sys.argv[3])
    out_json = sys.argv[sys.argv.index("--json") + 1] if "--json" in sys.argv else None
    etas = {}  # (frame, seq) -> [(now_us, eta_us)]
    end = time.time() + seconds
    while time.time() < end:
        try:
            frames = get(base, "/api/frames")
        except OSError:
            time.sleep(0.5)
            continue
        for f in frames:
            w, t = f.get("watch"), f.get("test")
            if not w or not t or w.get("ready_us") or not w.get("ready_eta_us"):
                continue
            now = stamp_us(f.get("last_reading_at"))
            if now:
                etas.setdefault((f["id"], w["seq"]), []).append((now, w["ready_eta_us"]))
        time.sleep(0.5)

    truth = {}
    with open(truth_path) as fh:
        for line in fh:
            line = line.strip()
            if line:
                r = json.loads(line)
                truth[(r["frame"], r["seq"])] = r
    frames = get(base, "/api/frames")
    rows = []
    for f in frames:
        t = f.get("test")
        if not t:
            continue
        red = get(base, f"/api/tests/{t['test_id']}/compression")
        for inc in red["increments"]:
            key = (f["id"], inc["seq"])
            tr = truth.get(key)
            if tr is None or inc.get("ready_at") is None:
                continue
            analysis = get(base, f"/api/frames/{f['id']}/increments/{inc['seq']}/analysis")
            onset_true = stamp_us(tr["onset_at"])
            ready = stamp_us(inc["ready_at"])
            t100_us = tr["t100_min"] * 6e7
            row = {
                "frame": f["id"],
                "seq": inc["seq"],
                "stress_kpa": inc["stress_kpa"],
                "truth_cv": tr["cv_mm2_per_min"],
                "cv_taylor": inc.get("cv_taylor_mm2_per_min"),
                "cv_casagrande": inc.get("cv_casagrande_mm2_per_min"),
                "cv_trusted": analysis.get("cv_mm2_per_min"),
                "cv_method": analysis.get("cv_method"),
                "t50": inc.get("t50_min"),
                "t90": inc.get("t90_min"),
                "truth_t50": tr["t50_min"],
                "truth_t90": tr["t90_min"],
                "ready_over_t100": (ready - onset_true) / t100_us,
                "flags": inc.get("flags", []),
            }
            # The ETA after t50 (true), against the actual ready time, as a share of the elapsed time to it.
            seen = [(now, eta) for now, eta in etas.get(key, []) if now >= onset_true + tr["t50_min"] * 6e7]
            row["eta_errors"] = [(eta - ready) / (ready - onset_true) for _, eta in seen if ready > onset_true]
            rows.append(row)

    def rel(a, b):
        return None if a is None or b is None else abs(a / b - 1.0)

    print(f"load steps that reached ready and are in the answer key: {len(rows)}")
    report = {"steps": len(rows)}
    for name, key in [("cv(√t)", "cv_taylor"), ("cv(log t)", "cv_casagrande"), ("cv trusted", "cv_trusted")]:
        errs = [e for e in (rel(r[key], r["truth_cv"]) for r in rows) if e is not None]
        missing = sum(1 for r in rows if r[key] is None)
        print(f"  {name:11s} |error|: median {fmt(pct(errs, 0.5))}, p90 {fmt(pct(errs, 0.9))}, max {fmt(max(errs) if errs else None)}"
              f"  ({len(errs)} with a value, {missing} without)")
        report[key] = {"median": pct(errs, 0.5), "p90": pct(errs, 0.9), "n": len(errs), "missing": missing}
    for name, key, tkey in [("t50", "t50", "truth_t50"), ("t90", "t90", "truth_t90")]:
        errs = [e for e in (rel(r[key], r[tkey]) for r in rows) if e is not None]
        print(f"  {name:11s} |error|: median {fmt(pct(errs, 0.5))}, p90 {fmt(pct(errs, 0.9))}")
        report[key] = {"median": pct(errs, 0.5), "p90": pct(errs, 0.9)}
    ratios = [r["ready_over_t100"] for r in rows]
    print(f"  ready/t100: min {fmt(min(ratios) if ratios else None)}, median {fmt(pct(ratios, 0.5))}, p90 {fmt(pct(ratios, 0.9))},"
          f" under 1: {sum(1 for x in ratios if x < 1.0)}")
    report["ready_over_t100"] = {"min": min(ratios) if ratios else None, "median": pct(ratios, 0.5),
                                 "p90": pct(ratios, 0.9), "under_1": sum(1 for x in ratios if x < 1.0)}
    eta = [e for r in rows for e in r["eta_errors"]]
    within = sum(1 for e in eta if abs(e) <= 0.3)
    steps_with_eta = [r for r in rows if r["eta_errors"]]
    steps_within = sum(1 for r in steps_with_eta if sum(1 for e in r["eta_errors"] if abs(e) <= 0.3) >= 0.8 * len(r["eta_errors"]))
    print(f"  ETA after t50: {len(eta)} samples, within ±30 %: {fmt(within / len(eta) if eta else None)};"
          f" load steps with ≥ 80 % of their samples within: {steps_within} of {len(steps_with_eta)}")
    report["eta"] = {"samples": len(eta), "within_30pct": within / len(eta) if eta else None,
                     "steps_within": steps_within, "steps": len(steps_with_eta)}
    trusted = [(rel(r["cv_trusted"], r["truth_cv"]), r) for r in rows if r["cv_trusted"] is not None]
    large = [(e, r) for e, r in trusted if e > 1.0]
    flagged = [r for e, r in large if r["flags"]]
    print(f"  trusted cv off by more than 2×: {len(large)}, of which flagged: {len(flagged)}")
    report["beyond_2x"] = len(large)
    report["beyond_2x_unflagged"] = len(large) - len(flagged)
    worst = sorted(trusted, key=lambda x: -x[0])[:8]
    print("  worst trusted cv:")
    for e, r in worst:
        print(f"    {r['frame']} step {r['seq']} ({r['stress_kpa']} kPa): {r['cv_method']} {fmt(r['cv_trusted'])} vs {fmt(r['truth_cv'])}"
              f" (|error| {fmt(e)}); √t {fmt(r['cv_taylor'])}, log t {fmt(r['cv_casagrande'])}; flags: {'; '.join(r['flags']) or 'none'}")
    if out_json:
        with open(out_json, "w") as fh:
            json.dump({"summary": report, "rows": rows}, fh, indent=1)


if __name__ == "__main__":
    main()
