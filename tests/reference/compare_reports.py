#!/usr/bin/env python3
"""Compares every numeric figure of two linbudget report.json files and prints the largest changes.

Figures already in dB (fields ending in _db, _dbc, _dbv, _dbm; margins, limits and values of
dB budget lines; Monte Carlo percentiles of dB metrics) are compared by their difference; every
other number by 20*log10 of its ratio (a relative change in dB). Numbers that change sign or
become zero are listed apart (as an infinite change). Records in lists are matched by their
identifying fields (stage, temperature, corner, frequency, amplitude, metric, input) when they
have them, otherwise by position. Fields present in only one report are listed, not compared.

--reverse-biased-only leaves out what rests on a point the NEW report marks as saturating
(points, two-tone figures, budget lines, P1dB and IIP3 fit points, steering points and what is
derived from them, transfer-curve samples with a forward-biased side, sizing records whose
trials saturate, corner-spread lines resting on a saturating point in some corner, and Monte
Carlo amplitudes whose collector-base margin comes within 20 mV of zero at the 5th
percentile), so the comparison covers exactly the figures a change to saturation must not
move. Numbers below 1e-15 in magnitude on both sides count as zero.

Usage:
    python3 compare_reports.py OLD/report.json NEW/report.json [--top 15] [--limit 1e-6]
        [--ignore FIELD]... [--reverse-biased-only]

Exit status 0 when every compared figure moved by at most --limit dB, 1 otherwise.
Standard library only.
"""
import argparse
import json
import math
import sys

DB_SUFFIXES = ("_db", "_dbc", "_dbv", "_dbm")
DB_LEAVES = {"margin", "best_margin", "margins"}
KEYS = ("stage", "temperature_c", "corner", "frequency_hz", "amplitude_v", "metric", "input_v",
        "emitter_resistance_ohm")


def in_db(path, record):
    """Whether the number at `path` (inside `record`, the nearest enclosing dict) is in dB."""
    names = [p for p in path if isinstance(p, str)]
    last = names[-1] if names else ""
    if last.endswith(DB_SUFFIXES) or last in DB_LEAVES:
        return True
    unit = record.get("unit") if isinstance(record, dict) else None
    if last in {"limit", "value", "typical", "min", "max", "median", "p05", "p95"}:
        return unit in ("dB", "dBc")
    return False


def key_of(item):
    if isinstance(item, dict):
        key = tuple((k, item[k]) for k in KEYS if k in item and not isinstance(item[k], (dict, list)))
        return key or None
    return None


def saturated(record):
    """Whether a record of the NEW report rests on a saturating point."""
    if not isinstance(record, dict):
        return False
    if record.get("region") == "saturating":
        return True
    if "base_collector_v" in record and max(record["base_collector_v"]) > 0:
        return True
    margin = record.get("collector_base_margin_v")
    if isinstance(margin, (int, float)) and margin < 0:
        return True
    return False


def saturated_keys(report):
    """(stage, temperature, metric) of every figure resting on a saturating point in some
    corner, and (stage, temperature, frequency, amplitude) of Monte Carlo amplitudes near it."""
    lines, amplitudes, steering = set(), set(), set()
    for b in report.get("budget", []):
        if b.get("region") == "saturating":
            lines.add((b["stage"], b["temperature_c"], b["metric"]))
    for i in report.get("intercepts", []):
        if i.get("p1db_region") == "saturating":
            lines.add((i["stage"], i["temperature_c"], "p1db"))
        if i.get("iip3_fit_region") == "saturating":
            for m in ("iip3", "oip3"):
                lines.add((i["stage"], i["temperature_c"], m))
    for s in report.get("stages", []):
        if s.get("steering_region") == "saturating":
            steering.add((s["stage"], s["temperature_c"], s.get("corner", "")))
            for m in ("steering_range", "iip3", "oip3"):
                lines.add((s["stage"], s["temperature_c"], m))
    for m in report.get("monte_carlo", []):
        if m["metric"] == "collector_base_margin" and (m["p05"] is None or m["p05"] < 0.02):
            amplitudes.add((m["stage"], m["temperature_c"], m["frequency_hz"], m["amplitude_v"]))
    # Two-tone figures of the population rest on twice the amplitude: judged by the nominal
    # point's two-tone margin.
    for p in report.get("points", []):
        margin = p.get("two_tone_collector_base_margin_v")
        if margin is not None and margin < 0.02:
            for metric in ("im2", "im3", "iip2"):
                amplitudes.add((p["stage"], p["temperature_c"], p["frequency_hz"], p["amplitude_v"], metric))
    return lines, amplitudes, steering


def leave_out(record, options):
    """Whether a record of the NEW report rests on a saturating point."""
    if saturated(record):
        return True
    stage, temperature = record.get("stage"), record.get("temperature_c")
    if "metric" in record and "typical" in record:
        return (stage, temperature, record["metric"]) in options.lines
    if "metric" in record and "limit" in record and record["metric"] in ("iip3", "oip3", "steering_range", "p1db"):
        return (stage, temperature, record["metric"]) in options.lines
    if "metric" in record and "runs" in record and "amplitude_v" in record:
        at = (stage, temperature, record["frequency_hz"], record["amplitude_v"])
        return at in options.amplitudes or at + (record["metric"],) in options.amplitudes
    if "emitter_resistance_ohm" in record and "scan" in record:
        return any(t.get("collector_base_margin_v") is not None and t["collector_base_margin_v"] < 0
                   for t in record["scan"])
    return False


def walk(old, new, path, record, out, missing, options):
    if isinstance(new, dict) and options.reverse_biased_only and leave_out(new, options):
        out["skipped"] += 1
        return
    if isinstance(old, dict) and isinstance(new, dict):
        for key in old:
            if key in new:
                sub = walk_child(old, new, key, options)
                if sub:
                    walk(old[key], new[key], path + [key], new, out, missing, options)
            else:
                missing.add(("only in old", dotted(path) + key))
        for key in new:
            if key not in old:
                missing.add(("only in new", dotted(path) + key))
    elif isinstance(old, list) and isinstance(new, list):
        old_keys = [key_of(i) for i in old]
        new_keys = [key_of(i) for i in new]
        if all(k is not None for k in old_keys + new_keys) and len(set(new_keys)) == len(new_keys):
            index = {k: i for i, k in enumerate(new_keys)}
            for i, k in enumerate(old_keys):
                if k in index:
                    walk(old[i], new[index[k]], path + [index[k]], record, out, missing, options)
                else:
                    missing.add(("record only in old", dotted(path) + str(dict(k))))
            for k in set(new_keys) - set(old_keys):
                missing.add(("record only in new", dotted(path) + str(dict(k))))
        else:
            if len(old) != len(new):
                out["changes"].append((math.inf, path, len(old), len(new), "list length"))
            for i, (a, b) in enumerate(zip(old, new)):
                walk(a, b, path + [i], record, out, missing, options)
    elif isinstance(old, bool) or isinstance(new, bool):
        if old != new:
            out["changes"].append((math.inf, path, old, new, "changed"))
    elif isinstance(old, (int, float)) and isinstance(new, (int, float)):
        out["compared"] += 1
        if old == new or (abs(old) < 1e-15 and abs(new) < 1e-15):
            return
        if in_db(path, record):
            out["changes"].append((abs(new - old), path, old, new, "dB difference"))
        elif old != 0 and new != 0 and (old > 0) == (new > 0):
            out["changes"].append((abs(20 * math.log10(new / old)), path, old, new, "relative, dB"))
        else:
            out["changes"].append((math.inf, path, old, new, "sign or zero change"))
    elif old != new:
        out["changes"].append((math.inf, path, old, new, "changed"))


def walk_child(old, new, key, options):
    """Whether to descend into field `key` (two-tone fields of a saturating two-tone drive,
    P1dB and IIP3 fields resting on a saturating point, are left out when filtering)."""
    if key in options.ignore:
        return False
    if not options.reverse_biased_only:
        return True
    if key in ("im3_dbc", "im2_dbc", "iip3_effective_v", "two_tone_fundamental_v", "sfdr_dbc",
               "dynamic_range_db") and new.get("two_tone_region") == "saturating":
        return False
    if key == "p1db_v" and new.get("p1db_region") == "saturating":
        return False
    stage_key = (new.get("stage"), new.get("temperature_c"), new.get("corner", ""))
    if key in ("steering_range_v", "steering_low_v", "steering_high_v", "iip3_fit_amplitude_v",
               "iip2_v", "iip3_v", "oip3_v", "iip3_dbv", "iip3_dbm", "im3_slope",
               "spurious_free_dynamic_range_db") and (stage_key in options.steering or new.get("steering_region") == "saturating"):
        # The intercept search starts from the steering range: its fit point moves with it.
        return False
    if key in ("iip3_v", "oip3_v", "iip3_dbv", "iip3_dbm", "iip3_fit_amplitude_v", "im3_slope",
               "iip2_v", "spurious_free_dynamic_range_db") \
            and new.get("iip3_fit_region") == "saturating":
        return False
    return True


def dotted(path):
    return "".join(f"{p}." if isinstance(p, str) else f"[{p}]." for p in path)


def describe(report, path):
    node = report
    label = []
    for p in path:
        node = node[p]
        if isinstance(node, dict):
            for key in KEYS:
                if key in node and not isinstance(node[key], (dict, list)):
                    label.append(f"{key}={node[key]}")
    return ", ".join(dict.fromkeys(label))


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("old")
    parser.add_argument("new")
    parser.add_argument("--top", type=int, default=15)
    parser.add_argument("--limit", type=float, default=1e-6)
    parser.add_argument("--ignore", action="append", default=[],
                        help="field name to leave out (repeatable), e.g. samples")
    parser.add_argument("--reverse-biased-only", action="store_true")
    options = parser.parse_args()
    with open(options.old) as f:
        old = json.load(f)
    with open(options.new) as f:
        new = json.load(f)
    options.lines, options.amplitudes, options.steering = saturated_keys(new)
    out = {"changes": [], "compared": 0, "skipped": 0}
    missing = set()
    walk(old, new, [], {}, out, missing, options)
    changes = sorted(out["changes"], key=lambda c: -c[0])
    for kind, field in sorted(missing):
        print(f"{kind}: {field}")
    worst = changes[0][0] if changes else 0.0
    print(f"numbers compared: {out['compared']}; changed: {len(changes)}; "
          f"records left out as saturating: {out['skipped']}; largest change {worst:.3e} dB")
    for size, path, a, b, how in changes[:options.top]:
        print(f"  {size:.3e}  {dotted(path)[:-1]}  {a!r} -> {b!r}  ({how}; {describe(new, path[:-1])})")
    return 0 if worst <= options.limit else 1


if __name__ == "__main__":
    sys.exit(main())
