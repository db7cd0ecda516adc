#!/usr/bin/env python3
"""join_ref.py -- an independent, deliberately simple reference for abtally's join.

It reads a config (DESIGN.md "Experiment config") and one or more JSON-lines
event logs, applies DESIGN.md's event rules and join rules, and prints the
fields of abtally's final summary that it computes, as one JSON object.

What makes it independent of abtally (src/event_jansson.c, src/timefmt.c,
src/ledger.c, src/report.c):
  * it is written from DESIGN.md, in Python, with the standard library only
    (json, datetime, math); it shares no code, no parser and no data
    structure with abtally;
  * it is not incremental: it reads the whole log into memory, keeps every
    event, and only then joins, unit by unit, from the complete lists.  There
    is no watermark, no pending list, no sweep, no id-forgetting, no
    hashing of ids or units and no moving exposure;
  * times are exact integers of microseconds (datetime's calendar, not a
    days-from-civil formula); sums use math.fsum; means and the sample
    variance are two-pass (mean first, then the squared deviations), not
    Welford updates.
Where DESIGN.md leaves a detail of the event decoder open, the reference
mirrors what abtally documents in include/event.h, include/timefmt.h and
README.md (for example: a required field that is absent or an empty string,
"kind" and "time" included, is missing_field; "value" defaults to 1;
integers are read as doubles; a duplicate key makes a line not_json; a number
that overflows a double makes it not_finite; times are limited to the years
1900..9999; fraction digits past the sixth are dropped; a leap second :60 is
the next second).

Rules taken from README.md where DESIGN.md is silent:
  * cap applies to the per-unit sum; for a ratio metric to the numerator (and
    to the pre-period twin of each, which only reference_only shows);
  * event ids are scoped by unit: a repeated (unit, id) pair is a duplicate,
    the same id on two units is not;
  * orphan_outcomes: outcomes (of a metric's event, not duplicates) after
    window.start whose unit had no exposure at their time: the unit was never
    exposed, or the outcome is earlier than exposure - pre_days (than the
    exposure itself without a covariate).

Assumptions (checked; the reference stops with an error when they fail):
  * a duplicate arrives less than --dedup-horizon (24 h) of event time after
    its first occurrence's time, measured from the latest event time seen
    before it, so "remembered for a bounded horizon" never matters.

Usage:
  join_ref.py --config EXP.json [--lateness-minutes 60] FILE... > expected.json

Output: {"exp", "time", "final", "units", "metrics", "integrity"} with the
same names and layout as abtally's final record (metric rows for every arm
but the control: n, mean, control_n, control_mean), plus
"reference_only": figures abtally does not print (per-arm sample variances,
sums, covariate means, counters), kept so that a fixture's expected output
records them too.
"""

import argparse
import datetime
import json
import math
import re
import sys

MAX_LINE = 1024 * 1024  # bytes; a longer line is too_long
MAX_ATTRS = 16

REASONS = ["not_json", "missing_field", "bad_type", "unknown_kind", "bad_time",
           "not_finite", "too_long", "unknown_arm", "empty_line"]

EPOCH = datetime.date(1970, 1, 1).toordinal()
US = 1000000


def day_number(y, m, d):
    """Days since 1970-01-01 of a proleptic Gregorian date (ValueError if invalid)."""
    return datetime.date(y, m, d).toordinal() - EPOCH


TIME_MIN_US = day_number(1900, 1, 1) * 86400 * US
TIME_MAX_US = (day_number(9999, 12, 31) * 86400 + 86399) * US


class Reject(Exception):
    def __init__(self, reason):
        super().__init__(reason)
        self.reason = reason


class AssumptionFailed(Exception):
    pass


# ------------------------------------------------------------------ times

RFC3339 = re.compile(
    r"([0-9]{4})-([0-9]{2})-([0-9]{2})[Tt ]([0-9]{2}):([0-9]{2}):([0-9]{2})"
    r"(?:\.([0-9]+))?([Zz]|[+-][0-9]{2}:[0-9]{2})", re.ASCII)


def parse_rfc3339(s):
    """Microseconds since the epoch, or None when s is not an accepted RFC 3339 time."""
    m = RFC3339.fullmatch(s)
    if not m:
        return None
    y, mo, d, h, mi, se = (int(m.group(i)) for i in range(1, 7))
    if not (1 <= mo <= 12 and h <= 23 and mi <= 59 and se <= 60):
        return None
    try:
        days = day_number(y, mo, d)
    except ValueError:  # no such day, or year 0
        return None
    frac = 0
    if m.group(7) is not None:
        digits = (m.group(7) + "000000")[:6]  # truncate past the sixth digit
        frac = int(digits)
    off = 0
    z = m.group(8)
    if z not in ("Z", "z"):
        oh, om = int(z[1:3]), int(z[4:6])
        if oh > 23 or om > 59:
            return None
        off = (oh * 3600 + om * 60) * (-1 if z[0] == "-" else 1)
    t = (days * 86400 + h * 3600 + mi * 60 + se - off) * US + frac
    if t < TIME_MIN_US or t > TIME_MAX_US:
        return None
    return t


def parse_epoch_ms(x):
    if not math.isfinite(x) or x != math.floor(x):
        return None
    if x < TIME_MIN_US // 1000 or x > TIME_MAX_US // 1000:
        return None
    return int(x) * 1000


def format_time(us):
    """YYYY-MM-DDTHH:MM:SS[.f]Z, fraction trimmed of trailing zeros (abtally's "time")."""
    secs, frac = divmod(us, US)
    days, sod = divmod(secs, 86400)
    d = datetime.date.fromordinal(days + EPOCH)
    s = "%04d-%02d-%02dT%02d:%02d:%02d" % (d.year, d.month, d.day, sod // 3600,
                                            sod // 60 % 60, sod % 60)
    if frac:
        s += ("." + "%06d" % frac).rstrip("0")
    return s + "Z"


# ------------------------------------------------------------------ decoding

class _Overflow(Exception):
    pass


class _Syntax(Exception):
    pass


def _number(text):
    v = float(text)  # integers too: every number is a double
    if math.isinf(v):
        raise _Overflow()
    return v


def _constant(text):
    raise _Syntax()  # NaN, Infinity, -Infinity are not JSON


def _pairs(pairs):
    keys = [k for k, _ in pairs]
    if len(set(keys)) != len(keys):
        raise _Syntax()  # duplicate key: ambiguous
    return dict(pairs)


def _strings_ok(v):
    """False when a string holds U+0000 or a lone surrogate (not accepted as JSON text)."""
    if isinstance(v, str):
        return not any(c == "\0" or 0xD800 <= ord(c) <= 0xDFFF for c in v)
    if isinstance(v, dict):
        return all(_strings_ok(k) and _strings_ok(x) for k, x in v.items())
    if isinstance(v, list):
        return all(_strings_ok(x) for x in v)
    return True


def _is_num(v):
    return type(v) is float


def _req_str(o, k):
    if k not in o:
        raise Reject("missing_field")
    v = o[k]
    if type(v) is not str:
        raise Reject("bad_type")
    if v == "":
        raise Reject("missing_field")
    return v


def decode(raw):
    """One line (bytes, without the newline) -> event dict; raises Reject."""
    if len(raw) > MAX_LINE:
        raise Reject("too_long")
    if raw.endswith(b"\r"):
        raw = raw[:-1]
    if raw.strip(b" \t\r") == b"":
        raise Reject("empty_line")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise Reject("not_json")
    try:
        o = json.loads(text, parse_float=_number, parse_int=_number,
                       parse_constant=_constant, object_pairs_hook=_pairs)
    except _Overflow:
        raise Reject("not_finite")
    except (_Syntax, ValueError, RecursionError):
        raise Reject("not_json")
    if type(o) is not dict or not _strings_ok(o):
        raise Reject("not_json")

    ev = {}
    if "kind" not in o:
        raise Reject("missing_field")
    if type(o["kind"]) is not str:
        raise Reject("bad_type")
    if o["kind"] == "":
        raise Reject("missing_field")  # a required field is absent or empty
    if o["kind"] not in ("assign", "outcome"):
        raise Reject("unknown_kind")
    ev["kind"] = o["kind"]

    if "time" not in o or o["time"] == "":
        raise Reject("missing_field")
    t = o["time"]
    if type(t) is str:
        ev["time"] = parse_rfc3339(t)
    elif _is_num(t):
        ev["time"] = parse_epoch_ms(t)
    else:
        raise Reject("bad_type")
    if ev["time"] is None:
        raise Reject("bad_time")

    ev["unit"] = _req_str(o, "unit")
    ev["id"] = None
    if "id" in o:
        if type(o["id"]) is not str:
            raise Reject("bad_type")
        ev["id"] = o["id"]

    if ev["kind"] == "assign":
        ev["exp"] = _req_str(o, "exp")
        ev["arm"] = _req_str(o, "arm")
        if "attrs" in o:
            a = o["attrs"]
            if type(a) is not dict or len(a) > MAX_ATTRS:
                raise Reject("bad_type")
            if any(type(v) is not str for v in a.values()):
                raise Reject("bad_type")
    else:
        ev["metric"] = _req_str(o, "metric")
        ev["value"] = 1.0
        if "value" in o:
            v = o["value"]
            if not _is_num(v):
                raise Reject("bad_type")
            if not math.isfinite(v):
                raise Reject("not_finite")
            ev["value"] = v
    return ev


def read_lines(path):
    """Lines of a file as bytes: split at \\n; a last line without \\n counts if not empty."""
    with open(path, "rb") as f:
        data = f.read()
    lines = data.split(b"\n")
    if lines and lines[-1] == b"":
        lines.pop()
    return lines


# ------------------------------------------------------------------ config

def config_time(v):
    t = parse_rfc3339(v) if type(v) is str else parse_epoch_ms(float(v))
    if t is None:
        sys.exit("join_ref: bad time in config: %r" % (v,))
    return t


def round_half_away(x):
    return int(math.floor(x + 0.5)) if x >= 0 else -int(math.floor(-x + 0.5))


def load_config(path):
    with open(path, "rb") as f:
        c = json.loads(f.read().decode("utf-8"))
    cfg = {
        "experiment": c["experiment"],
        "arms": [a["name"] for a in c["arms"]],
        "control": c.get("control", "control"),
        "start": TIME_MIN_US, "end": TIME_MAX_US,
        "pre_us": None, "metrics": [],
    }
    if "window" in c:
        cfg["start"] = config_time(c["window"]["start"])
        cfg["end"] = config_time(c["window"]["end"])
    if "covariate" in c:
        cfg["pre_us"] = round_half_away(float(c["covariate"]["pre_days"]) * 86400e6)
    for m in c.get("metrics", []):
        mc = {"name": m["name"], "type": m["type"], "cap": m.get("cap"), "window_us": None}
        if m["type"] == "ratio":
            mc["num"], mc["den"] = m["numerator"], m["denominator"]
        else:
            mc["event"] = m.get("event", m["name"])
        if "attribution_hours" in m:
            mc["window_us"] = round_half_away(float(m["attribution_hours"]) * 3600e6)
        cfg["metrics"].append(mc)
    return cfg


# ------------------------------------------------------------------ join

def mean_var(xs):
    """(n, mean, sample variance) by two passes; None where undefined."""
    n = len(xs)
    if n == 0:
        return 0, None, None
    m = math.fsum(xs) / n
    v = math.fsum((x - m) ** 2 for x in xs) / (n - 1) if n > 1 else None
    return n, m, v


def run(cfg, paths, lateness_us, horizon_us):
    rejected = {r: 0 for r in REASONS}
    cnt = {"lines_read": 0, "accepted": 0, "duplicates": 0, "other_experiment": 0,
           "outside_window": 0, "late_assignments": 0, "ignored_outcomes": 0,
           "assignments": 0, "outcomes": 0}
    arms = cfg["arms"]
    used_events = set()
    for mc in cfg["metrics"]:
        if mc["type"] == "ratio":
            used_events.update((mc["num"], mc["den"]))
        else:
            used_events.add(mc["event"])

    # 1. every line, in file order: decode, reject, de-duplicate.
    events = []           # accepted, not duplicate
    first_seen = {}       # (unit, id) -> event time of its first occurrence
    latest = None         # latest time over accepted non-duplicate events
    latest_any = None     # latest time over every decoded line ("time" of the record)
    for path in paths:
        for lineno, raw in enumerate(read_lines(path), 1):
            cnt["lines_read"] += 1
            try:
                ev = decode(raw)
            except Reject as r:
                rejected[r.reason] += 1
                continue
            latest_any = ev["time"] if latest_any is None else max(latest_any, ev["time"])
            if (ev["kind"] == "assign" and ev["exp"] == cfg["experiment"]
                    and ev["arm"] not in arms):
                rejected["unknown_arm"] += 1
                continue
            cnt["accepted"] += 1
            if ev["id"] is not None:
                key = (ev["unit"], ev["id"])
                if key in first_seen:
                    if first_seen[key] < latest - horizon_us:
                        raise AssumptionFailed(
                            "%s:%d: id %r repeats an event older than the dedup horizon"
                            % (path, lineno, ev["id"]))
                    cnt["duplicates"] += 1
                    continue
                first_seen[key] = ev["time"]
            latest = ev["time"] if latest is None else max(latest, ev["time"])
            ev["late"] = ev["time"] < latest - lateness_us
            events.append(ev)

    # 2. classify the events and group them per unit.
    assigns = {}   # unit -> [(time, arm)] of in-window assignments of this experiment
    outcomes = {}  # unit -> [(time, metric event name, value)]
    for ev in events:
        if ev["kind"] == "assign":
            if ev["exp"] != cfg["experiment"]:
                cnt["other_experiment"] += 1
                continue
            cnt["assignments"] += 1
            if not (cfg["start"] <= ev["time"] < cfg["end"]):
                cnt["outside_window"] += 1
                continue
            if ev["late"]:
                cnt["late_assignments"] += 1
            assigns.setdefault(ev["unit"], []).append((ev["time"], ev["arm"]))
        else:
            if ev["metric"] not in used_events:
                cnt["ignored_outcomes"] += 1
                continue
            cnt["outcomes"] += 1
            outcomes.setdefault(ev["unit"], []).append((ev["time"], ev["metric"], ev["value"]))

    pre = cfg["pre_us"] or 0
    exposure_of = {u: min(t for t, _ in al) for u, al in assigns.items()}
    orphans = sum(1 for u, os in outcomes.items() for (t, _, _) in os
                  if t >= cfg["start"] and (u not in exposure_of or t < exposure_of[u] - pre))

    # 3. per unit: exposure, arm, and per metric the value and the covariate.
    multi = 0
    multi_by_arm = {a: 0 for a in arms}
    unit_arm, unit_vals = {}, {}
    for u, al in assigns.items():
        named = {a for _, a in al}
        if len(named) > 1:
            multi += 1
            for a in named:
                multi_by_arm[a] += 1
            continue
        expo = min(t for t, _ in al)
        unit_arm[u] = al[0][1]
        evs = outcomes.get(u, [])
        vals = []
        for mc in cfg["metrics"]:
            def in_window(t):
                return expo <= t and (mc["window_us"] is None or t < expo + mc["window_us"])

            def in_pre(t):
                return cfg["pre_us"] is not None and expo - cfg["pre_us"] <= t < expo

            def pick(name, keep):
                return [v for (t, e, v) in evs if e == name and keep(t)]

            def capped(x):
                return min(x, mc["cap"]) if mc["cap"] is not None else x

            if mc["type"] == "mean":
                y = capped(math.fsum(pick(mc["event"], in_window)))
                x = capped(math.fsum(pick(mc["event"], in_pre)))
                vals.append({"y": y, "x": x})
            elif mc["type"] == "binary":
                y = 1.0 if any(v > 0 for v in pick(mc["event"], in_window)) else 0.0
                x = 1.0 if any(v > 0 for v in pick(mc["event"], in_pre)) else 0.0
                vals.append({"y": y, "x": x})
            else:
                vals.append({
                    "num": capped(math.fsum(pick(mc["num"], in_window))),
                    "den": math.fsum(pick(mc["den"], in_window)),
                    "pre_num": capped(math.fsum(pick(mc["num"], in_pre))),
                    "pre_den": math.fsum(pick(mc["den"], in_pre)),
                })
        unit_vals[u] = vals

    # 4. per arm and metric.
    units = {a: sum(1 for u in unit_arm if unit_arm[u] == a) for a in arms}
    per = {}   # (metric index, arm) -> summary
    for i, mc in enumerate(cfg["metrics"]):
        for a in arms:
            rows = [unit_vals[u][i] for u in sorted(unit_arm) if unit_arm[u] == a]
            s = {"metric": mc["name"], "arm": a}
            if mc["type"] == "ratio":
                nums = [r["num"] for r in rows]
                dens = [r["den"] for r in rows]
                n, _, vn = mean_var(nums)
                _, _, vd = mean_var(dens)
                sn, sd = math.fsum(nums), math.fsum(dens)
                s.update(n=n, mean=(sn / sd if n and sd != 0 else None),
                         sum_num=sn, sum_den=sd, var_num=vn, var_den=vd,
                         pre_sum_num=math.fsum(r["pre_num"] for r in rows),
                         pre_sum_den=math.fsum(r["pre_den"] for r in rows))
            else:
                ys = [r["y"] for r in rows]
                xs = [r["x"] for r in rows]
                n, m, v = mean_var(ys)
                _, mx, vx = mean_var(xs)
                s.update(n=n, mean=m, var=v, sum=math.fsum(ys), cov_mean=mx, cov_var=vx)
            per[(i, a)] = s

    ctl = cfg["control"]
    metric_rows = []
    for i, mc in enumerate(cfg["metrics"]):
        for a in arms:
            if a == ctl:
                continue
            metric_rows.append({"metric": mc["name"], "arm": a,
                                "n": per[(i, a)]["n"], "mean": per[(i, a)]["mean"],
                                "control_n": per[(i, ctl)]["n"],
                                "control_mean": per[(i, ctl)]["mean"]})

    integrity = {
        "multi_arm_units": multi,
        "orphan_outcomes": orphans,
        "duplicates": cnt["duplicates"],
        "outside_window": cnt["outside_window"],
        "late_assignments": cnt["late_assignments"],
        "other_experiment": cnt["other_experiment"],
        "ignored_outcomes": cnt["ignored_outcomes"],
        "lines_read": cnt["lines_read"],
        "accepted": cnt["accepted"],
        "rejected": rejected,
        "multi_arm_by_arm": multi_by_arm,
    }
    assert cnt["accepted"] + sum(rejected.values()) == cnt["lines_read"]
    return {
        "exp": cfg["experiment"],
        "time": format_time(latest_any if latest_any is not None else 0),
        "final": True,
        "units": units,
        "metrics": metric_rows,
        "integrity": integrity,
        "reference_only": {
            "per_arm": [per[(i, a)] for i in range(len(cfg["metrics"])) for a in arms],
            "assignments": cnt["assignments"],
            "outcomes": cnt["outcomes"],
            "exposed_units": len(assigns),
        },
    }


def main(argv=None):
    ap = argparse.ArgumentParser(description="independent reference for abtally's join")
    ap.add_argument("--config", required=True)
    ap.add_argument("--lateness-minutes", type=float, default=60)
    ap.add_argument("--dedup-horizon-hours", type=float, default=24)
    ap.add_argument("files", nargs="+")
    a = ap.parse_args(argv)
    cfg = load_config(a.config)
    try:
        out = run(cfg, a.files, round_half_away(a.lateness_minutes * 60e6),
                  round_half_away(a.dedup_horizon_hours * 3600e6))
    except AssumptionFailed as e:
        sys.exit("join_ref: outside the reference's assumptions: %s" % e)
    json.dump(out, sys.stdout, indent=1, allow_nan=False)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
