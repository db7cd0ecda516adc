#!/usr/bin/env python3
"""make_fixture.py -- seeded event logs for the replay reference test.

Scenario (invented): "Crumbly Lane", an online bakery, tests a one-tap
reorder button (and, in the three-arm case, a sticky basket) on its checkout.
Each case gets, in fixtures/replay/<case>/:
  config.json    the experiment config
  input.jsonl    the event log
  expected.json  the output of tests/reference/join_ref.py on them

The log is built to exercise the join rules: repeated assignments, multi-arm
units, assignments outside the window (before, after, and exactly at its
ends), assignments of another experiment, units never exposed, outcomes in
the pre-period, older than it, in and after each attribution window (and
exactly on its edges), a capped metric, values near 1e9, default values,
ignored outcome names, duplicate ids (next to the original, hours later in
the file, with different content; the same id on other units is no
duplicate), mixed time formats (Z, numeric offsets, fractions up to nine
digits, lowercase, a space for the T, epoch milliseconds), a few malformed
lines of every reject reason (too_long is added by the test itself), and
arrival order shuffled so that no event is more than 50 minutes (less than
the 1 h lateness bound) behind the latest event before it.

Usage:
  make_fixture.py [--out fixtures/replay] [CASE...]        generate cases
  make_fixture.py shuffle --seed N IN OUT                  reorder a log within 50 min

Everything is deterministic: fixed seeds, no clock, no environment.
"""

import argparse
import datetime
import json
import os
import random
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
sys.dont_write_bytecode = True  # leave no __pycache__ in the source tree
import join_ref  # noqa: E402  (used for the shuffle's time parsing and expected.json)

US = 1000000
MIN = 60 * US
HOUR = 3600 * US
DAY = 86400 * US
SHUFFLE_US = 50 * MIN  # arrival jitter: below the default 1 h lateness bound

EPOCH = datetime.datetime(1970, 1, 1)


class Raw:
    """A JSON literal written as is (number spellings, broken values)."""

    def __init__(self, text):
        self.text = text


def lit(v):
    return v.text if isinstance(v, Raw) else json.dumps(v, ensure_ascii=False)


def line_of(fields):
    return "{" + ",".join("%s:%s" % (json.dumps(k), lit(v)) for k, v in fields) + "}"


# ------------------------------------------------------------------ time spellings

OFFSETS = ["+01:00", "-05:30", "+05:45", "-00:00", "+13:00", "-11:00", "+02:00"]


def spell_time(rng, t, style=None):
    """(JSON value, the time it denotes in µs) for t in one of the accepted spellings."""
    if style is None:
        style = rng.choices(
            ["sec", "ms", "us", "ns", "off", "lower", "space", "epoch", "epoch_real"],
            [30, 25, 8, 3, 14, 3, 3, 12, 2])[0]
    if style in ("epoch", "epoch_real"):
        ms = t // 1000
        return (Raw("%d.0" % ms) if style == "epoch_real" else ms), ms * 1000
    off = 0
    zone = "Z"
    if style == "off":
        zone = rng.choice(OFFSETS)
        off = (int(zone[1:3]) * 3600 + int(zone[4:6]) * 60) * (-1 if zone[0] == "-" else 1)
    frac_style = style if style in ("ms", "us", "ns") else rng.choice(["sec", "sec", "ms"])
    if frac_style == "sec":
        t -= t % US
    elif frac_style == "ms":
        t -= t % 1000
    local = EPOCH + datetime.timedelta(microseconds=t + off * US)
    sep = "T"
    if style == "lower":
        sep, zone = "t", "z"
    elif style == "space":
        sep = " "
    s = local.strftime("%Y-%m-%d") + sep + local.strftime("%H:%M:%S")
    if frac_style == "ms":
        s += ".%03d" % (local.microsecond // 1000)
    elif frac_style == "us":
        s += ".%06d" % local.microsecond
    elif frac_style == "ns":
        s += ".%06d%03d" % (local.microsecond, rng.randrange(1000))  # digits 7-9 are dropped
    return s + zone, t


def spell_value(rng, v):
    """A number spelling of v that reads back as exactly v."""
    if v == int(v) and abs(v) < 1e15:
        k = rng.random()
        if k < 0.5:
            return Raw("%d" % int(v))
        if k < 0.7:
            return Raw("%d.0" % int(v))
    if rng.random() < 0.15 and v != 0:
        for p in range(1, 18):  # the shortest exponent spelling that reads back as v
            cand = "%.*e" % (p, v)
            if float(cand) == v:
                mant, exp = cand.split("e")
                return Raw("%se%d" % (mant.rstrip("0").rstrip("."), int(exp)))
    return Raw(repr(v))


# ------------------------------------------------------------------ case definitions

CASES = {
    "crumbly-two-arm": {
        "seed": 20270301,
        "units": 280,
        "config": {
            "experiment": "crumbly-reorder",
            "arms": [{"name": "control", "weight": 0.5}, {"name": "one_tap", "weight": 0.5}],
            "control": "control",
            "window": {"start": "2027-03-01T00:00:00Z", "end": "2027-03-08T00:00:00Z"},
            "metrics": [
                {"name": "basket_value", "type": "mean", "event": "basket_value",
                 "attribution_hours": 72},
                {"name": "purchased", "type": "binary", "event": "basket_value"},
                {"name": "value_per_visit", "type": "ratio", "numerator": "basket_value",
                 "denominator": "visit", "attribution_hours": 168},
                {"name": "basket_value_capped", "type": "mean", "event": "basket_value",
                 "attribution_hours": 72, "cap": 60},
                {"name": "oven_credit_micros", "type": "mean", "event": "oven_credit",
                 "role": "secondary"},
                {"name": "checkout_errors", "type": "mean", "event": "checkout_error",
                 "attribution_hours": 24, "role": "guardrail", "better": "lower"},
            ],
            "covariate": {"pre_days": 3},
            "alpha": 0.05,
            "srm": {"threshold": 0.001},
            "sequential": {"method": "spending", "shape": "obf", "planned_units": 2000},
        },
    },
    "crumbly-three-arm": {
        "seed": 20270302,
        "units": 150,
        "config": {
            "experiment": "crumbly-basket",
            "arms": [{"name": "control", "weight": 2}, {"name": "one_tap", "weight": 1.5},
                     {"name": "sticky_basket", "weight": 1.5}],
            "window": {"start": 1803859200000, "end": "2027-03-08T01:00:00+01:00"},
            "metrics": [
                {"name": "basket_value", "type": "mean", "attribution_hours": 48.5},
                {"name": "purchased", "type": "binary", "event": "basket_value",
                 "attribution_hours": 120},
                {"name": "value_per_visit", "type": "ratio", "numerator": "basket_value",
                 "denominator": "visit", "cap": 150},
                {"name": "basket_value_capped", "type": "mean", "event": "basket_value",
                 "cap": 75.5},
                {"name": "oven_credit_micros", "type": "mean", "event": "oven_credit",
                 "attribution_hours": 96},
                {"name": "checkout_errors", "type": "mean", "event": "checkout_error",
                 "role": "guardrail", "better": "lower"},
            ],
            "covariate": {"pre_days": 14},
            "sequential": {"method": "mixture", "planned_units": 2000},
        },
    },
}

OTHER_EXP = "crumbly-banner"
IGNORED = ["newsletter_open", "recipe_view"]


class Log:
    """Events under construction: (position key, line text, event time or None)."""

    def __init__(self, rng):
        self.rng = rng
        self.items = []
        self.n_ids = 0

    def new_id(self, prefix):
        self.n_ids += 1
        return "%s-%d" % (prefix, self.n_ids)

    def add(self, kind, t, unit, style=None, id_=True, key=None, extra=(), time_text=None,
            **kw):
        rng = self.rng
        if time_text is not None:
            tval = time_text
            assert join_ref.parse_rfc3339(tval) == t
        else:
            tval, t = spell_time(rng, t, style)
        fields = [("kind", kind), ("time", tval), ("unit", unit)]
        if kind == "assign":
            fields += [("exp", kw["exp"]), ("arm", kw["arm"])]
            if rng.random() < 0.1:
                fields.append(("attrs", {"platform": rng.choice(["ios", "android", "web"]),
                                         "region": rng.choice(["north", "south", "harbour"])}))
        else:
            fields.append(("metric", kw["metric"]))
            if "value" in kw:
                fields.append(("value", kw["value"] if isinstance(kw["value"], Raw)
                               else spell_value(rng, kw["value"])))
        if id_ is True and rng.random() < 0.93:
            id_ = self.new_id("a" if kind == "assign" else "o")
        if isinstance(id_, str):
            fields.append(("id", id_))
        fields += list(extra)
        if rng.random() < 0.2:  # key order is free
            rng.shuffle(fields)
        if key is None:
            key = t + rng.randrange(SHUFFLE_US)
        item = [key, line_of(fields), t, id_ if isinstance(id_, str) else None]
        self.items.append(item)
        return item


def build(case, spec):
    rng = random.Random(spec["seed"])
    cfg = spec["config"]
    exp = cfg["experiment"]
    arms = [a["name"] for a in cfg["arms"]]
    weights = [a["weight"] for a in cfg["arms"]]
    w0 = join_ref.config_time(cfg["window"]["start"])
    w1 = join_ref.config_time(cfg["window"]["end"])
    log = Log(rng)
    lift = {a: 1.0 + 0.08 * i for i, a in enumerate(arms)}

    def outcomes_around(unit, base, arm, span_before=10 * DAY, span_after=9 * DAY):
        """Visits, baskets, credits, errors and ignored events of one unit around base."""
        for _ in range(rng.randint(0, 3)):
            tv = base + rng.randrange(-span_before, span_after)
            r = rng.random()
            if r < 0.75:
                log.add("outcome", tv, unit, metric="visit")          # value absent: 1
            elif r < 0.9:
                log.add("outcome", tv, unit, metric="visit", value=1)
            else:
                log.add("outcome", tv, unit, metric="visit", value=2)
            if rng.random() < 0.45 * lift[arm]:
                v = round(rng.lognormvariate(3.3, 0.6), 2)
                if rng.random() < 0.05:
                    v = 0.0
                tb = tv + rng.randrange(MIN, 30 * MIN)
                log.add("outcome", tb, unit, metric="basket_value", value=v)
                if rng.random() < 0.06:  # a refund a little later
                    log.add("outcome", tb + rng.randrange(HOUR, 2 * DAY), unit,
                            metric="basket_value", value=-v)
            if rng.random() < 0.12:
                if rng.random() < 0.7:
                    log.add("outcome", tv + rng.randrange(MIN), unit, metric="checkout_error")
                else:
                    log.add("outcome", tv + rng.randrange(MIN), unit, metric="checkout_error",
                            value=rng.choice([1, 2, 3]))
            if rng.random() < 0.1:
                log.add("outcome", tv + rng.randrange(HOUR), unit, metric=rng.choice(IGNORED))
        if rng.random() < 0.5:
            for _ in range(rng.choice([1, 1, 2])):
                # loyalty credit in micro-crumbs: near 1e9, exact eighths
                v = 1e9 + rng.randrange(-4000000, 4000000) / 8
                log.add("outcome", base + rng.randrange(-2 * DAY, 6 * DAY), unit,
                        metric="oven_credit", value=v)

    units = ["u%04d" % i for i in range(1, spec["units"] + 1)]
    exposure = {}
    for i, u in enumerate(units):
        arm = rng.choices(arms, weights)[0]
        # exposure on a whole second for the first units (edge cases below), else anywhere
        expo = w0 + rng.randrange(w1 - w0 - HOUR)
        if i == 0:
            expo = w0                                   # exactly at window.start: inside
        expo -= expo % US if i < 12 else 0
        exposure[u] = (expo, arm)
        log.add("assign", expo, u, exp=exp, arm=arm)
        for _ in range(rng.choice([0, 0, 0, 0, 1, 2])):   # re-assignments, same arm
            log.add("assign", expo + rng.randrange(10 * MIN, 5 * DAY), u, exp=exp, arm=arm)
        if rng.random() < 0.04:                         # a stray one before the window
            other = rng.choice(arms)                    # (any arm: outside, so not multi)
            log.add("assign", w0 - rng.randrange(1, 3 * DAY), u, exp=exp, arm=other)
        outcomes_around(u, expo, arm)

    # Edge cases on the attribution and pre-period boundaries: whole seconds, or
    # one microsecond before, spelled with nine fraction digits (".999999999":
    # digits past the sixth are dropped, not rounded).
    pre_us = round(cfg["covariate"]["pre_days"] * DAY)
    h = next(m["attribution_hours"] for m in cfg["metrics"] if m["name"] == "basket_value")
    w_us = round(h * HOUR)

    def just_before(t):
        return join_ref.format_time(t - 1)[:-1] + "999Z"

    for u in units[1:6]:
        expo, arm = exposure[u]
        log.add("outcome", expo, u, metric="basket_value", value=11.25)          # in
        log.add("outcome", expo + w_us, u, metric="basket_value", value=13.5)   # out
        log.add("outcome", expo + w_us - 1, u, time_text=just_before(expo + w_us),
                metric="basket_value", value=17.75)                              # in
        log.add("outcome", expo - 1, u, time_text=just_before(expo),
                metric="basket_value", value=7.5)                                # pre
        log.add("outcome", expo - pre_us, u, metric="basket_value", value=19.0) # pre: in
        log.add("outcome", expo - pre_us - 1, u, style="us", metric="basket_value",
                value=23.0)                                                      # pre: out
        log.add("outcome", expo - 1, u, style="us", metric="visit")             # pre
        log.add("outcome", expo + 168 * HOUR, u, metric="visit", value=5)       # 168 h edge
        log.add("outcome", expo, u, metric="checkout_error",
                value=Raw("1e-400") if u == units[1] else 1)                     # 1e-400 reads 0
    # Exposure is the earliest assignment, not the first to arrive: the later
    # assignment arrives first, the earlier one right after it (31 minutes of
    # event time behind, within the lateness bound), and a basket between the
    # two counts.
    for j in range(4):
        u = "e%03d" % j
        arm = arms[j % len(arms)]
        t0 = w0 + (j + 1) * DAY + rng.randrange(DAY) // US * US
        log.add("assign", t0 + 30 * MIN, u, key=t0 + 30 * MIN, exp=exp, arm=arm)
        log.add("assign", t0, u, key=t0 + 31 * MIN, exp=exp, arm=arm)
        log.add("outcome", t0 + 10 * MIN, u, key=t0 + 32 * MIN, metric="basket_value",
                value=21.0 + j)
    # Units with a big basket: the cap binds.
    for u in units[6:16]:
        expo, arm = exposure[u]
        log.add("outcome", expo + rng.randrange(HOUR, 40 * HOUR), u, metric="basket_value",
                value=round(rng.uniform(80, 400), 2))

    # Multi-arm units: one more in-window assignment naming another arm.
    for u in rng.sample(units[20:], 9):
        expo, arm = exposure[u]
        other = rng.choice([a for a in arms if a != arm])
        t = w0 + rng.randrange(w1 - w0)
        log.add("assign", t, u, exp=exp, arm=other)

    # Units never exposed: assignments only before the window or at/after its end.
    for j in range(7):
        u = "n%03d" % j
        arm = rng.choice(arms)
        t = w1 if j == 0 else (w0 - 1 if j == 1 else
                               (w0 - rng.randrange(HOUR, 4 * DAY) if j % 2 else
                                w1 + rng.randrange(HOUR, 3 * DAY)))
        log.add("assign", t, u, style="us" if j < 2 else None, exp=exp, arm=arm)
        outcomes_around(u, t, arm, span_before=5 * DAY, span_after=5 * DAY)
    # Visitors who were never assigned at all.
    for j in range(5):
        u = "b%03d" % j
        outcomes_around(u, w0 + rng.randrange(-3 * DAY, w1 - w0), arms[0])

    # Another experiment's assignments (its arm names are not checked).
    for j in range(40):
        u = rng.choice(units) if j < 30 else "x%03d" % j
        log.add("assign", w0 + rng.randrange(-2 * DAY, w1 - w0 + DAY), u, exp=OTHER_EXP,
                arm=rng.choice(["control", "banner", "holdout"]))

    # A unit id given once as raw UTF-8 and once escaped: the same unit.
    t = w0 + 2 * DAY + 12345 * US
    log.add("assign", t, "u-café", exp=exp, arm=arms[-1])
    log.items.append([t + 20 * MIN, '{"kind":"outcome","time":"%s","unit":"u-caf\\u00e9",'
                      '"metric":"basket_value","value":31.5,"id":"o-cafe"}'
                      % join_ref.format_time(t + 20 * MIN), t + 20 * MIN, "o-cafe"])

    # Duplicates.
    plain = [it for it in log.items if it[3] is not None]
    for it in rng.sample(plain, 25):                    # next to the original
        log.items.append([it[0] + rng.randrange(2 * MIN), it[1], it[2], it[3]])
    for it in rng.sample(plain, 12):                    # hours later in the file
        log.items.append([it[0] + rng.randrange(2 * HOUR, 20 * HOUR), it[1], it[2], it[3]])
    # Same id, different content, later: the first occurrence counts.
    u0, (e0, a0) = units[30], exposure[units[30]]
    first = log.add("outcome", e0 + 3 * HOUR, u0, style="sec", id_="o-retry-1",
                    metric="basket_value", value=40.0)
    log.add("outcome", e0 + 3 * HOUR, u0, style="sec", id_="o-retry-1", key=first[0] + 3 * HOUR,
            metric="basket_value", value=400.0)
    u1, (e1, a1) = units[31], exposure[units[31]]
    first = log.add("assign", e1 + HOUR, u1, id_="a-resend-1", exp=exp, arm=a1)
    log.add("assign", e1 + 2 * HOUR, u1, id_="a-resend-1", key=first[0] + 4 * HOUR, exp=exp,
            arm=[a for a in arms if a != a1][0])      # would make the unit multi-arm
    first = log.add("outcome", e1 + 5 * HOUR, u1, id_="shared-9", metric="visit")
    log.add("assign", e1 + 5 * HOUR, u1, id_="shared-9", key=first[0] + 90 * MIN, exp=exp,
            arm=a1)
    # Ids are scoped by unit: the same id on another unit is no duplicate.
    for u in units[40:43]:
        e, a = exposure[u]
        log.add("outcome", e + 9 * HOUR, u, id_="o-same-id-elsewhere", metric="basket_value",
                value=9.5)
    # An id-less event sent twice counts twice.
    u2, (e2, a2) = units[32], exposure[units[32]]
    tw = e2 + 7 * HOUR
    for k in range(2):
        log.add("outcome", tw, u2, style="sec", id_=None, key=tw + k * MIN,
                metric="basket_value", value=12.5)

    # Malformed lines; an id on a rejected line is not remembered.
    exp_j = json.dumps(exp)
    tm = join_ref.format_time(w0 + 3 * DAY)
    u3, (e3, a3) = units[33], exposure[units[33]]
    good = log.add("outcome", e3 + 2 * HOUR, u3, style="sec", id_="o-after-reject",
                   metric="basket_value", value=27.25)
    bad = [
        # not_json
        '{"kind":"assign","time":"%s","unit":"u0100"' % tm,
        'Crumbly Lane order log, part 2',
        '{"kind":"outcome","kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":"control"}'
        % (tm, exp_j),
        '["assign","%s","u0100"]' % tm,
        '"just a string"',
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":NaN}' % tm,
        b'{"kind":"outcome","time":"' + tm.encode() + b'","unit":"u\xff0100","metric":"visit"}',
        '{"kind":"outcome","time":"%s","unit":"u0100\\u0000","metric":"visit"}' % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"visit"} x' % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"visit","value":01}' % tm,
        '{"kind":"outcome","time":"%s","unit":"\\ud800","metric":"visit"}' % tm,
        '{"kind":"assign","time":"%s","unit":"u0101","exp":%s,"arm":"control",'
        '"attrs":{"platform":"ios","platform":"web"}}' % (tm, exp_j),
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"visit","value":Infinity}' % tm,
        # missing_field
        '{"time":"%s","unit":"u0100","metric":"visit"}' % tm,
        '{"kind":"outcome","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"%s","metric":"visit"}' % tm,
        '{"kind":"outcome","time":"%s","unit":"","metric":"visit"}' % tm,
        '{"kind":"assign","time":"%s","unit":"u0100","arm":"control"}' % tm,
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s}' % (tm, exp_j),
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":""}' % (tm, exp_j),
        '{"kind":"outcome","time":"%s","unit":"u0100","value":3}' % tm,
        '{"time":"not a time","unit":"u0100","metric":"visit"}',
        # bad_type
        '{"kind":7,"time":"%s","unit":"u0100","metric":"visit"}' % tm,
        '{"kind":"outcome","time":true,"unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":null,"unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"%s","unit":12345,"metric":"visit"}' % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"visit","id":17}' % tm,
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":"control","attrs":["ios"]}'
        % (tm, exp_j),
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":"control",'
        '"attrs":{"platform":1}}' % (tm, exp_j),
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":"control","attrs":{%s}}'
        % (tm, exp_j, ",".join('"k%d":"v"' % i for i in range(17))),
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":"42.5"}'
        % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":true}' % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":null}' % tm,
        '{"kind":"assign","time":"%s","unit":"u0100","exp":3,"arm":"control"}' % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":["visit"]}' % tm,
        # unknown_kind
        '{"kind":"exposure","time":"%s","unit":"u0100","exp":%s,"arm":"control"}' % (tm, exp_j),
        '{"kind":"Assign","time":"%s","unit":"u0100","exp":%s,"arm":"control"}' % (tm, exp_j),
        '{"kind":"","time":"%s","unit":"u0100"}' % tm,
        # bad_time (one carries the id of a later good line)
        '{"kind":"outcome","time":"2027-02-30T10:00:00Z","unit":"%s","metric":"visit",'
        '"id":"o-after-reject"}' % u3,
        '{"kind":"outcome","time":"2027-03-02 10:00:00","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"2027-03-02T24:00:00Z","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"2027-03-02T10:00:00+24:00","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"1899-12-31T23:59:59Z","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":1803945600000.5,"unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":253402300800000,"unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"2027-3-2T10:00:00Z","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"2027-03-02T10:00:00.Z","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"2027-03-02T10:00:00+0100","unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"","unit":"u0100","metric":"visit"}',
        # not_finite
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":1e400}'
        % tm,
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":-1e400}'
        % tm,
        '{"kind":"outcome","time":1e400,"unit":"u0100","metric":"visit"}',
        '{"kind":"outcome","time":"%s","unit":"u0100","metric":"basket_value","value":%s}'
        % (tm, "9" * 400),
        # unknown_arm (and one more below, whose id a good line uses again)
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":"Control"}' % (tm, exp_j),
        '{"kind":"assign","time":"%s","unit":"u0100","exp":%s,"arm":"control "}' % (tm, exp_j),
        # empty_line
        '',
        '   \t ',
    ]
    lo = min(it[0] for it in log.items)
    hi = max(it[0] for it in log.items)
    for b in bad:
        # unknown_arm lines decode (the arm is checked against the config later):
        # keep them near their time, like any event
        near = w0 + 3 * DAY + rng.randrange(SHUFFLE_US) if decodes(b) else None
        log.items.append([near if near is not None else rng.randrange(lo, hi), b, None, None])
    t_reuse = e3 + 20 * MIN
    log.items.append([t_reuse + rng.randrange(SHUFFLE_US),
                      '{"kind":"assign","time":"%s","unit":"%s","exp":%s,"arm":"holdout",'
                      '"id":"a-reuse"}' % (join_ref.format_time(t_reuse), u3, exp_j), t_reuse, None])
    log.add("assign", e3 + 30 * MIN, u3, id_="a-reuse", key=t_reuse + SHUFFLE_US, exp=exp, arm=a3)
    # Accepted oddities: a leap second, whitespace around the object, a CRLF ending,
    # extra keys, an underflowing value (0), exponent spellings of a time.
    u4, (e4, a4) = units[34], exposure[units[34]]
    day = join_ref.format_time(e4 + DAY)[:10]
    leap = join_ref.parse_rfc3339(day + "T23:59:60Z")
    odd = [
        (leap, '{"kind":"outcome","time":"%sT23:59:60Z","unit":"%s","metric":"visit",'
               '"id":"o-leap"}' % (day, u4)),
        (e4 + HOUR, '  \t{"kind":"outcome","time":%d,"unit":"%s","metric":"checkout_error"}  '
                    % ((e4 + HOUR) // 1000, u4)),
        (e4 + 2 * HOUR, '{"kind":"outcome","time":"%s","unit":"%s","metric":"basket_value",'
                        '"value":2.5e1,"id":"o-crlf"}\r' % (join_ref.format_time(e4 + 2 * HOUR), u4)),
        (e4 + 3 * HOUR, '{"note":"from the till","kind":"outcome","time":%se3,"unit":"%s",'
                        '"metric":"visit","value":1e-400,"source":"till-4"}'
                        % (repr((e4 + 3 * HOUR) // 1000 / 1000), u4)),
    ]
    for t, text in odd:
        log.items.append([t + rng.randrange(SHUFFLE_US), text, t, None])

    log.items.sort(key=lambda it: it[0])
    return cfg, log.items


def decodes(text):
    """True when the decoder accepts the line (its arm may still be unknown)."""
    try:
        join_ref.decode(text if isinstance(text, bytes) else text.encode("utf-8"))
    except join_ref.Reject:
        return False
    return True


def write_lines(path, texts):
    with open(path, "wb") as f:
        for i, text in enumerate(texts):
            f.write(text if isinstance(text, bytes) else text.encode("utf-8"))
            last = i + 1 == len(texts)
            if not last or not text.strip(b" \t\r" if isinstance(text, bytes) else " \t\r"):
                f.write(b"\n")  # a last non-blank line goes without newline: it still counts


def shuffle_log(src, dst, seed):
    """Writes src's lines reordered: each line that has a time moves to time + U(0, 50 min)
    (so no event trails the latest one before it by an hour); lines without a time keep
    their neighbour; every repeated (unit, id) keeps its first occurrence first."""
    rng = random.Random(seed)
    lines = join_ref.read_lines(src)
    keyed = []
    prev = 0
    first_key = {}
    for raw in lines:
        try:
            ev = join_ref.decode(raw)
        except join_ref.Reject:
            ev = None
        if ev is None:
            key = prev
        else:
            key = ev["time"] + rng.randrange(SHUFFLE_US)
            if ev["id"] is not None:
                scoped = (ev["unit"], ev["id"])
                if scoped in first_key:
                    key = max(key, first_key[scoped] + 1)
                else:
                    first_key[scoped] = key
            prev = key
        keyed.append((key, rng.random(), raw))
    keyed.sort(key=lambda k: (k[0], k[1]))
    write_lines(dst, [raw for _, _, raw in keyed])


def main():
    if len(sys.argv) > 1 and sys.argv[1] == "shuffle":
        ap = argparse.ArgumentParser(prog="make_fixture.py shuffle")
        ap.add_argument("--seed", type=int, required=True)
        ap.add_argument("src")
        ap.add_argument("dst")
        a = ap.parse_args(sys.argv[2:])
        shuffle_log(a.src, a.dst, a.seed)
        return
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--out", default=os.path.join(HERE, "..", "..", "fixtures", "replay"))
    ap.add_argument("cases", nargs="*")
    a = ap.parse_args()
    for case in a.cases or sorted(CASES):
        cfg, items = build(case, CASES[case])
        d = os.path.join(a.out, case)
        os.makedirs(d, exist_ok=True)
        with open(os.path.join(d, "config.json"), "w") as f:
            json.dump(cfg, f, indent=2)
            f.write("\n")
        write_lines(os.path.join(d, "input.jsonl"), [it[1] for it in items])
        out = subprocess.run([sys.executable, os.path.join(HERE, "join_ref.py"),
                              "--config", os.path.join(d, "config.json"),
                              os.path.join(d, "input.jsonl")],
                             check=True, stdout=subprocess.PIPE).stdout
        with open(os.path.join(d, "expected.json"), "wb") as f:
            f.write(out)
        if json.loads(out)["integrity"]["late_assignments"] != 0:
            sys.exit("%s: the log has assignments later than the lateness bound" % case)
        print("%s: %d lines, %d bytes" % (case, len(items),
                                          os.path.getsize(os.path.join(d, "input.jsonl"))))


if __name__ == "__main__":
    main()
