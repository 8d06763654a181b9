"""Degradation scorecard (issue #13): every method and the recommended rate on fresh synthetic
fleets from the independent generator (``../shared/validation/synth_fleet.py``).

For each case (scenario, seed, ``--set`` variations) the whole pipeline runs through the CLI
(tests/validation/harness.py) and the outside scorer compares the rates with the injected truth.
Printed per method and for the recommended rate, over inverters of drift-free, fault-free
fleets ("clean") and over all inverters:

* median and mean error (estimate − truth, %/yr), median absolute error, share within 0.2 %/yr;
* coverage of the stated 95 % interval, and of the 68 % interval for the recommended rate;

and for the warnings (scored here against truth.json, which only this scoring side reads):

* sensor-drift warnings: share of inverters on a drift-free sensor that carry one (false
  alarms), share of inverters on a drifting sensor that carry one (detections);
* level shifts: inverters without a step that get a reported drop/rise (false), injected steps
  found within 7 days and sized within 1 percentage point;
* whether each warning (caveat) names the method it is about.

Targets (issue #13): median |error| ≤ 0.05 %/yr and mean error within ±0.03 %/yr on clean
fleets for DC/AC 1.1-1.4; 95 % coverage 90-98 %, 68 % coverage 60-76 %; drift false alarms
≤ 5 % with a 1 %/yr drift caught.

Run by hand (a few minutes per case on a shared 2-core machine)::

    python tests/validation/scorecard_degradation.py                # the quick suite
    python tests/validation/scorecard_degradation.py --suite full   # more seeds and variations
    python tests/validation/scorecard_degradation.py --json out.json

Skips with a reason when ``../shared/validation`` is absent.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))

from harness import run_case, shared_available  # noqa: E402

FEW = ["n_inverters=8"]
DRIFT_1 = ('faults={"sensor_faults": [{"sensor": "POA1", "kind": "drift", "rate_pct_per_yr": '
           '-1.0, "frac": [0.05, 0.1], "until_end": true}]}')
STEP_4 = ('faults={"underperformance": [{"frac": [0.45, 0.55], "loss": 0.04, "until_end": true, '
          '"cause": "step"}]}')

#: (label, scenario, seed, sets, clean): ``clean`` = drift-free and fault-free by construction
SUITES = {
    "quick": [
        ("clean dcac1.1", "clean", 101, FEW + ["years=3", "array.dc_ac_ratio=[1.08,1.12]"], True),
        ("clean dcac1.4", "clean", 102, FEW + ["years=3", "array.dc_ac_ratio=[1.36,1.42]"], True),
        ("desert no soiling", "soiling_arid", 103, FEW + ["years=3", "soiling=null"], True),
        ("clean + POA1 drift -1 %/yr", "clean", 104, FEW + ["years=3", DRIFT_1], False),
        ("clean + 4 % step", "clean", 105, FEW + ["years=3", STEP_4], False),
        ("soiling_arid", "soiling_arid", 106, FEW, False),
        ("faults", "faults", 107, FEW, False),
    ],
}
SUITES["full"] = SUITES["quick"] + [
    ("clean", "clean", 201, FEW + ["years=4"], True),
    ("clean dcac1.25", "clean", 202, FEW + ["years=3", "array.dc_ac_ratio=[1.22,1.28]"], True),
    ("clean dcac1.4 b", "clean", 203, FEW + ["years=4", "array.dc_ac_ratio=[1.36,1.42]"], True),
    ("po valley no faults", "faults", 204, FEW + ["years=3", "faults=null"], True),
    ("clean + POA2 drift -1.5", "clean", 205, FEW + ["years=3", DRIFT_1.replace(
        "POA1", "POA2").replace("-1.0", "-1.5")], False),
    ("clean + 4 % step b", "clean", 206, FEW + ["years=3", STEP_4], False),
    ("soiling_arid b", "soiling_arid", 207, FEW + ["years=4"], False),
    ("messy_format", "messy_format", 208, FEW + ["years=3"], True),
]

DRIFT_LATE = ('faults={"sensor_faults": [{"sensor": "POA1", "kind": "drift", "rate_pct_per_yr": '
              '-1.0, "frac": [0.45, 0.5], "until_end": true}]}')
D11, D125, D14 = ("array.dc_ac_ratio=[1.08,1.12]", "array.dc_ac_ratio=[1.22,1.28]",
                  "array.dc_ac_ratio=[1.36,1.42]")
#: several seeds per variation (issue #13): DC/AC 1.1 / 1.25 / 1.4, three climates, a steady
#: and a late-starting sensor drift, soiling, a step
SUITES["seeds"] = [
    ("clean dcac1.1", "clean", 302, FEW + ["years=3", D11], True),
    ("clean dcac1.1", "clean", 305, FEW + ["years=4", D11], True),
    ("clean dcac1.1", "clean", 101, FEW + ["years=3", D11], True),
    ("clean dcac1.25", "clean", 303, FEW + ["years=4", D125], True),
    ("clean dcac1.25", "clean", 202, FEW + ["years=3", D125], True),
    ("clean dcac1.15-1.30", "clean", 201, FEW + ["years=4"], True),
    ("clean dcac1.4", "clean", 301, FEW + ["years=4", D14], True),
    ("clean dcac1.4", "clean", 304, FEW + ["years=3", D14], True),
    ("clean dcac1.4", "clean", 307, FEW + ["years=3", D14], True),
    ("clean dcac1.4", "clean", 102, FEW + ["years=3", D14], True),
    ("clean dcac1.4", "clean", 203, FEW + ["years=4", D14], True),
    ("desert no soiling", "soiling_arid", 306, FEW + ["years=3", "soiling=null"], True),
    ("desert no soiling", "soiling_arid", 103, FEW + ["years=3", "soiling=null"], True),
    ("po valley no faults", "faults", 308, FEW + ["years=3", "faults=null"], True),
    ("po valley no faults", "faults", 204, FEW + ["years=3", "faults=null"], True),
    ("POA1 drift -1 %/yr", "clean", 311, FEW + ["years=3", DRIFT_1], False),
    ("POA1 drift -1 %/yr", "clean", 312, FEW + ["years=4", DRIFT_1], False),
    ("POA1 drift -1 %/yr from mid-record", "clean", 313, FEW + ["years=4", DRIFT_LATE], False),
    ("POA1 drift -1 %/yr from mid-record", "clean", 314, FEW + ["years=4", DRIFT_LATE], False),
    ("soiling_arid", "soiling_arid", 315, FEW + ["years=4"], False),
    ("soiling_arid", "soiling_arid", 316, FEW + ["years=4"], False),
    ("4 % step", "clean", 317, FEW + ["years=3", STEP_4], False),
]

DRIFT_WORDS = ("calibration",)  # warnings start with a method code: "sensor_drift_check: ..."


def _truth(case: dict) -> dict:
    """The generator's truth (scoring side only)."""
    return json.loads((Path(case["dir"]) / "gen" / "truth.json").read_text(encoding="utf-8"))


def _inverter_warnings(block: dict) -> tuple[list[str], list[dict]]:
    texts = list(block.get("warnings") or [])
    for m in (block.get("degradation") or {}).values():
        if isinstance(m, dict):
            texts += list(m.get("warnings") or [])
    rec = block.get("recommended") or {}
    return texts, list(rec.get("caveats") or [])


def warning_rates(case: dict) -> dict:
    """Per-inverter warning outcomes of one case against its truth."""
    truth = _truth(case)
    drift_sensors = {f["sensor"] for f in truth.get("sensor_faults", []) if f["kind"] == "drift"}
    steps = {}
    for iid, t in truth["inverters"].items():
        for u in t.get("underperformance", []):
            steps[iid] = u
    rows = []
    for b in case["results"].get("inverters", []):
        iid = b["device_id"]
        t = truth["inverters"].get(iid, {})
        texts, caveats = _inverter_warnings(b)
        drift_warn = any(c.get("kind") == "sensor_drift" for c in caveats) or any(
            any(w in x.lower() for w in DRIFT_WORDS) for x in texts)
        shifts = [c for c in (b.get("change_points") or []) if c.get("kind") in ("drop", "rise")]
        step = steps.get(iid)
        found = sized = None
        if step is not None:
            t0 = pd.Timestamp(step["start"]).tz_convert(None).normalize()
            near = [c for c in shifts if abs((pd.Timestamp(c["day"]) - t0).days) <= 7]
            found = bool(near)
            size_true = -100 * float(step["loss_frac"])
            sized = bool(near) and min(abs(float(c["size_pct"]) - size_true) for c in near) <= 1.0
        rows.append({"inverter": iid, "on_drifting_sensor": t.get("sensors", {}).get(
            "poa_irradiance") in drift_sensors, "drift_warning": drift_warn,
            "has_step": step is not None, "n_shifts": len(shifts), "step_found_7d": found,
            "step_sized_1pp": sized, "soiling": bool(t.get("soiling_episodes")),
            "caveats_without_method": sum(1 for c in caveats if c.get("kind") in (
                "sensor_drift", "level_shift", "soiling", "methods_disagree")
                and not c.get("method"))})
    return {"rows": rows}


def soiling_and_drift(case: dict) -> dict:
    """Soiling loss against its interval and a drifting sensor's onset, against the truth."""
    truth = _truth(case)
    out = {}
    losses = [t.get("soiling_energy_loss_pct") for t in truth["inverters"].values()
              if t.get("soiling_energy_loss_pct") is not None]
    if losses and max(losses) > 0:
        true_loss = float(np.mean(losses))
        for f in case["results"].get("flags", []) or []:
            det = f.get("details") or {}
            if f.get("kind") == "soiling" and isinstance(det.get("soiling_ratio_weighted"),
                                                         (int, float)):
                est = 100 * (1 - det["soiling_ratio_weighted"])
                lo = 100 * (1 - det.get("soiling_ratio_weighted_high", det["soiling_ratio_weighted"]))
                hi = 100 * (1 - det.get("soiling_ratio_weighted_low", det["soiling_ratio_weighted"]))
                out["soiling"] = {"true_loss_pct": true_loss, "est_loss_pct": est,
                                  "interval_pct": [lo, hi], "err_pp": est - true_loss,
                                  "point_in_interval": lo <= est <= hi,
                                  "truth_in_interval": lo <= true_loss <= hi}
                break
        # the degradation job's fleet figure (inverters' own soiling ratios, energy-weighted)
        fl = ((case["results"].get("site_result") or {}).get("soiling") or {})
        if isinstance(fl.get("fleet_loss_pct"), (int, float)):
            est = float(fl["fleet_loss_pct"])
            lo, hi = fl.get("fleet_loss_interval_pct") or [est, est]
            out["soiling_fleet"] = {"true_loss_pct": true_loss, "est_loss_pct": est,
                                    "interval_pct": [lo, hi], "err_pp": est - true_loss,
                                    "point_in_interval": lo <= est <= hi,
                                    "truth_in_interval": lo <= true_loss <= hi}
    drifts = [f for f in truth.get("sensor_faults", []) if f["kind"] == "drift"]
    if drifts:
        d = drifts[0]
        judged = [b.get("sensor_drift") or {} for b in case["results"].get("inverters", [])]
        judged = [j for j in judged if j.get("sensor_id") == d["sensor"]]
        j = judged[0] if judged else {}
        start = pd.Timestamp(d["start"]).tz_convert(None).normalize()
        data0 = pd.Timestamp(truth["period"]["start"]).tz_localize(None) if isinstance(
            truth.get("period"), dict) and truth["period"].get("start") else None
        onset = j.get("onset_day")
        out["drift"] = {"sensor": d["sensor"], "true_rate": -float(d["rate_pct_per_yr"]),
                        "true_start": start.date().isoformat(),
                        "late": bool(data0 is not None and (start - data0).days > 270),
                        "judged": bool(j.get("judged")), "rate": j.get("drift_pct_per_yr"),
                        "whole_period": j.get("whole_period_pct_per_yr"), "onset": onset,
                        "onset_err_days": None if not onset else
                        int((pd.Timestamp(onset) - start).days)}
    return out


def _summ(rows: list[dict]) -> dict:
    if not rows:
        return {}
    err = np.array([r["err"] for r in rows])
    cis = [r["in_ci"] for r in rows if r["in_ci"] is not None]
    return {"n": len(rows), "median_err": float(np.median(err)), "mean_err": float(err.mean()),
            "median_abs_err": float(np.median(np.abs(err))),
            "within_0.2": float(np.mean(np.abs(err) <= 0.2)),
            "coverage": float(np.mean(cis)) if cis else None}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--suite", choices=sorted(SUITES), default="quick")
    ap.add_argument("--only", default=None, help="run only cases whose label contains this")
    ap.add_argument("--json", type=Path, default=None, help="write the figures as JSON")
    ap.add_argument("--keep", type=Path, default=None, help="keep the case folders here")
    ap.add_argument("--reuse", action="store_true",
                    help="with --keep: read back cases already scored there instead of re-running")
    ap.add_argument("--redo", action="store_true",
                    help="with --keep: recompute only the degradation rates of cases kept there "
                         "(same ingest/daily/flags), run the others in full")
    a = ap.parse_args(argv)
    ok, why = shared_available()
    if not ok:
        print(why)
        return 0
    cases = [c for c in SUITES[a.suite] if not a.only or a.only in c[0]]
    per_method: dict[str, dict[str, list]] = {}
    warn_rows, timing, done, extras = [], [], [], []
    t_all = time.perf_counter()
    for label, scen, seed, sets, clean in cases:
        wd = a.keep / f"{scen}-{seed}" if a.keep else None
        print(f"-- {label}: {scen} seed {seed} {' '.join(sets)}", flush=True)
        res = run_case(scen, seed, sets, workdir=wd, keep=a.keep is not None, reuse=a.reuse,
                       redo=a.redo)
        if not res["ok"]:
            print("   FAILED:", res["error"])
            continue
        timing.append((label, res["timing_s"]))
        done.append(label)
        print("   " + (", ".join(f"{k} {v:.0f} s" for k, v in res["timing_s"].items())
                       or "read back from an earlier run"), flush=True)
        for m, blk in res["score"].get("degradation", {}).items():
            for r in blk["per_inverter"]:
                r = dict(r, case=label, seed=seed, clean_fleet=clean)
                per_method.setdefault(m, {"clean": [], "all": [], "unconfounded": []})
                per_method[m]["all"].append(r)
                if clean:
                    per_method[m]["clean"].append(r)
                if not r["confounded"]:
                    per_method[m]["unconfounded"].append(r)
        for r in warning_rates(res)["rows"]:
            warn_rows.append(dict(r, case=label, clean_fleet=clean))
        extra = soiling_and_drift(res)
        if extra:
            extras.append(dict(extra, case=label, seed=seed))
    print(f"\nDegradation scorecard, suite '{a.suite}': {len(done)} cases, "
          f"{time.perf_counter() - t_all:.0f} s. Errors in %/yr (estimate - truth).")
    print("(peer_ratio_year_pairs / peer_relative is a rate relative to the fleet, not an absolute "
          "rate; the drift check is a sensor drift, not scored)")
    hdr = f"{'method':<36}{'subset':<13}{'n':>4}{'med err':>9}{'mean err':>9}{'med|err|':>9}" \
          f"{'<=0.2':>7}{'cover':>7}"
    print(hdr)
    figures = {}
    for m in sorted(per_method, key=lambda x: (x != "recommended", x)):
        figures[m] = {}
        for subset in ("clean", "unconfounded", "all"):
            s = _summ(per_method[m][subset])
            if not s:
                continue
            figures[m][subset] = s
            cov = "-" if s["coverage"] is None else f"{100 * s['coverage']:.0f}%"
            print(f"{m:<36}{subset:<13}{s['n']:>4}{s['median_err']:>+9.3f}{s['mean_err']:>+9.3f}"
                  f"{s['median_abs_err']:>9.3f}{100 * s['within_0.2']:>6.0f}%{cov:>7}")
    w = pd.DataFrame(warn_rows)
    wfig = {}
    if len(w):
        clean_drift_free = w[~w["on_drifting_sensor"]]
        on_drift = w[w["on_drifting_sensor"]]
        no_step = w[~w["has_step"]]
        soil = w[w["soiling"] & ~w["has_step"]]
        steps = w[w["has_step"]]
        wfig = {
            "drift_false_alarm": float(clean_drift_free["drift_warning"].mean()),
            "drift_false_alarm_n": int(len(clean_drift_free)),
            "drift_detection": float(on_drift["drift_warning"].mean()) if len(on_drift) else None,
            "drift_detection_n": int(len(on_drift)),
            "shift_false_inverters": float((no_step["n_shifts"] > 0).mean()),
            "shift_false_n": int(len(no_step)),
            "shift_false_on_soiling": float((soil["n_shifts"] > 0).mean()) if len(soil) else None,
            "steps_found_7d": float(steps["step_found_7d"].mean()) if len(steps) else None,
            "steps_sized_1pp": float(steps["step_sized_1pp"].mean()) if len(steps) else None,
            "steps_n": int(len(steps)),
            "caveats_without_method": int(w["caveats_without_method"].sum()),
        }
        print("\nWarnings (per inverter):")
        print(f"  sensor-drift warning on drift-free sensors: {100 * wfig['drift_false_alarm']:.0f}% "
              f"of {wfig['drift_false_alarm_n']}")
        if wfig["drift_detection"] is not None:
            print(f"  sensor-drift warning on drifting sensors:   {100 * wfig['drift_detection']:.0f}% "
                  f"of {wfig['drift_detection_n']}")
        print(f"  level shift reported without an injected step: "
              f"{100 * wfig['shift_false_inverters']:.0f}% of {wfig['shift_false_n']} inverters"
              + ("" if wfig["shift_false_on_soiling"] is None else
                 f" (soiled: {100 * wfig['shift_false_on_soiling']:.0f}%)"))
        if wfig["steps_n"]:
            print(f"  injected steps found within 7 days: {100 * wfig['steps_found_7d']:.0f}%, "
                  f"sized within 1 pp: {100 * wfig['steps_sized_1pp']:.0f}% of {wfig['steps_n']}")
        print(f"  caveats that do not name their method: {wfig['caveats_without_method']}")
    rec = per_method.get("recommended", {}).get("all", [])
    per_case = []
    if rec:
        print("\nRecommended rate per case: mean error, median |error| (%/yr), 95 % / 68 % coverage")
        ci68 = {(r["case"], r["seed"], r["inverter"]): r["in_ci"]
                for r in per_method.get("recommended_ci68", {}).get("all", [])}
        groups: dict[tuple, list] = {}
        for r in rec:
            groups.setdefault((r["case"], r["seed"]), []).append(r)
        for (label, seed), rows in groups.items():
            err = np.array([r["err"] for r in rows])
            c95 = float(np.mean([bool(r["in_ci"]) for r in rows]))
            c68 = float(np.mean([bool(ci68.get((label, seed, r["inverter"]))) for r in rows]))
            per_case.append({"case": label, "seed": seed, "n": len(rows),
                             "mean_err": float(err.mean()),
                             "median_abs_err": float(np.median(np.abs(err))),
                             "cover95": c95, "cover68": c68})
            print(f"  {label:<38} seed {seed:>4}: {err.mean():+.3f} {np.median(np.abs(err)):.3f} "
                  f"{100 * c95:4.0f}% {100 * c68:4.0f}%  (n={len(rows)})")
    if extras:
        print("\nSoiling loss and sensor-drift onset:")
        for e in extras:
            for key, what in (("soiling", "soiling loss (flags, site-median index)"),
                              ("soiling_fleet", "fleet soiling loss (degradation job)")):
                if key not in e:
                    continue
                so = e[key]
                print(f"  {e['case']} (seed {e['seed']}): {what} {so['est_loss_pct']:.2f} % "
                      f"[{so['interval_pct'][0]:.2f}, {so['interval_pct'][1]:.2f}] vs true "
                      f"{so['true_loss_pct']:.2f} % (error {so['err_pp']:+.2f} pp; point in its "
                      f"interval: {so['point_in_interval']}, truth in it: {so['truth_in_interval']})")
            if "drift" in e:
                d = e["drift"]
                rate = "-" if d["rate"] is None else f"{d['rate']:+.2f}"
                whole = "-" if d["whole_period"] is None else f"{d['whole_period']:+.2f}"
                print(f"  {e['case']} (seed {e['seed']}): {d['sensor']} drift {d['true_rate']:+.2f} "
                      f"%/yr from {d['true_start']}: judged {d['judged']}, rate {rate} (whole "
                      f"period {whole}), onset {d['onset']} ({d['onset_err_days']} days off)")
    if a.json:
        a.json.write_text(json.dumps({"suite": a.suite, "cases": done, "degradation": figures,
                                      "warnings": wfig, "timing_s": timing,
                                      "recommended_per_case": per_case, "soiling_drift": extras},
                                     indent=1, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
