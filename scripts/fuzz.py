#!/usr/bin/env python3
"""Fuzz the aftercast binary with mutated input files, study files and flags.

A pre-release check, not part of `cargo test`. Run it for 10 minutes before a release:

    python3 scripts/fuzz.py [--bin PATH] [--minutes M] [--seed S] [--work DIR] [--keep-failures DIR]

Defaults: --bin $CARGO_TARGET_DIR/debug/aftercast (or target/debug/aftercast), --minutes 10,
--seed 1, --work $TMPDIR/aftercast-fuzz-seed<S>, --keep-failures <work>/failures.

It copies small heads of the demo inputs (demo-data/) into <work>/pristine, writes a small
study file over them, and then, until the time is up, builds one case after another: a valid
base command of one verb (forecast, synthetic, match, compare, plan forecast, windows, run,
inspect) with one to three mutations of its input files (bytes, lines, columns, quotes, line
endings, BOM, huge cells, control characters, special numbers, non-UTF-8, headers, fields),
of the study file (wrong types, unknown keys, `..` paths, very long names, ...) or of its flags
(a dropped flag, out-of-range numbers, unknown names, outputs pointing at an input, a missing
folder, a directory or a null device). Each case runs in a fresh folder <work>/case under a
timeout (--timeout, 60 s) and a 4 GiB address-space cap (RLIMIT_AS).

Findings, per run (a run can show several kinds):
  crash          killed by a signal (abort, segfault, OOM abort) or a Rust panic report in stderr
                 ("panicked", "stack backtrace", "RUST_BACKTRACE")
  internal       stderr says "internal error" (aftercast's own wording for a bug or an
                 output it could not write)
  exit-code      exit code other than 0 (success) and 2 (bad input or usage)
  input-changed  an input file's sha256 differs after the run (inputs must never be touched)
  device-replaced an output pointed at a character device (a stand-in for /dev/null made in
                 the case folder) and the device is no longer a device afterwards
  slow           no exit within the timeout (not a crash)
  hygiene        exit 2 with a message longer than 2,000 characters or more than 3 lines, or
                 with raw control characters or non-UTF-8 bytes echoed to the terminal

The same seed builds the same sequence of cases (case N is built from random.Random of
(seed, N)) for a given binary (the flags each verb accepts are read from its --help); how many
cases run depends on the time budget. `--case N` reruns one case. If the binary is rebuilt
while a case runs, the case is run again on the new binary; the summary says when the binary
changed during a fuzzing run. Every case with a finding is saved
(at most --keep-per-signature of each distinct signature) under --keep-failures as NNN/ with
the mutated inputs, the command, its stderr and a repro.sh. Exit status 0 when there were no
findings of kind crash, internal, exit-code, input-changed or device-replaced; 1 otherwise.

Python 3.11 standard library only. The child never gets a real system path as an output:
/dev/null is stood in by a character-device node in the case folder (root only; otherwise
that mutation is skipped), because an atomic write renames over the target.
"""

from __future__ import annotations

import argparse
import gzip
import hashlib
import json
import os
import random
import re
import resource
import shlex
import shutil
import signal
import stat
import struct
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
DEMO = REPO / "demo-data"
MEM_LIMIT = 4 << 30  # RLIMIT_AS of every child
FSIZE_LIMIT = 2 << 30  # no single file written by a child beyond 2 GiB
PROGRESS_EVERY = 30.0
FAILING_KINDS = ("crash", "internal", "exit-code", "input-changed", "device-replaced")
ALL_KINDS = ("crash", "internal", "exit-code", "input-changed", "device-replaced", "slow", "hygiene")
VERBS = ("forecast", "synthetic", "match", "compare", "plan forecast", "windows", "run", "inspect")
IS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0

# Scratch name, source under demo-data/, data rows kept (None = the whole file).
INPUTS = [
    ("app_daily.csv", "app_daily.csv", None),
    ("calendar.csv", "calendar.csv", None),
    ("regions_weekly.csv", "regions_weekly.csv", None),
    ("members.csv", "members.csv", 3000),
    ("experiment.csv", "past_test/experiment.csv", 2000),
    ("pool.csv", "past_test/pool.csv", 2000),
    ("events.csv", "events.csv", 20000),
    ("exposures.csv", "exposures.csv", 800),
]
STUDY = "study.toml"
CASE_DIR_NAME = "case"  # study `..` paths and repro.sh rely on this name

# ---------------------------------------------------------------------------------------------
# The base commands: valid invocations (each exits 0 on the pristine inputs).
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Base:
    name: str
    verb: str
    flags: tuple  # (flag, value or None for a switch), flags without the leading --
    inputs: tuple  # scratch files the command reads
    positionals: tuple = ()


def _f(*pairs):
    return tuple(pairs)


BASES = [
    Base("forecast-harmonic", "forecast", _f(
        ("data", "app_daily.csv"), ("time", "date"), ("outcome", "app_orders"), ("start", "2026-03-02"),
        ("model", "harmonic"), ("log", None), ("draws", "100"), ("json", "out.json"), ("quiet", None)),
        ("app_daily.csv",)),
    Base("forecast-structural", "forecast", _f(
        ("data", "app_daily.csv"), ("time", "date"), ("outcome", "app_revenue"),
        ("controls", "catalogue_orders,weather_index"), ("log-controls", "catalogue_orders"),
        ("events", "calendar.csv"), ("start", "2026-03-02"), ("end", "2026-05-31"), ("season", "7"),
        ("trend", "level"), ("folds", "1"), ("washout", "7"), ("log", None), ("draws", "100"),
        ("json", "out.json"), ("quiet", None)),
        ("app_daily.csv", "calendar.csv")),
    Base("synthetic-weights", "synthetic", _f(
        ("data", "regions_weekly.csv"), ("unit", "region"), ("time", "week"), ("outcome", "revenue"),
        ("treated", "Fernbury"), ("start", "2026-04-06"), ("draws", "100"), ("json", "out.json"), ("quiet", None)),
        ("regions_weekly.csv",)),
    Base("synthetic-sdid", "synthetic", _f(
        ("data", "regions_weekly.csv"), ("unit", "region"), ("time", "week"), ("outcome", "revenue"),
        ("treated", "Elderhope,Fernbury"), ("start", "2026-04-06"), ("end", "2026-05-11"), ("method", "sdid"),
        ("exclude", "Redtarn"), ("draws", "100"), ("out", "out"), ("quiet", None)),
        ("regions_weekly.csv",)),
    Base("match-ipw", "match", _f(
        ("data", "members.csv"), ("treatment", "joined"), ("outcome", "spend_90d"),
        ("covariates", "spend_pre,visits_pre,tenure_months,region,age_band"), ("categorical", "region,age_band"),
        ("method", "ipw"), ("rope", "1"), ("draws", "60"), ("json", "out.json"), ("quiet", None)),
        ("members.csv",)),
    Base("match-nearest", "match", _f(
        ("data", "members.csv"), ("id", "customer_id"), ("treatment", "joined"), ("outcome", "spend_90d"),
        ("covariates", "spend_pre,visits_pre,tenure_months,age_band"), ("categorical", "age_band"),
        ("exact", "age_band"), ("method", "nearest"), ("replace", None), ("k", "2"), ("bias-correct", None),
        ("draws", "50"), ("out", "out"), ("quiet", None)),
        ("members.csv",)),
    Base("compare-pool", "compare", _f(
        ("experiment", "experiment.csv"), ("arm", "arm"), ("outcome", "spend_90d"), ("pool", "pool.csv"),
        ("covariates", "spend_pre,visits_pre,tenure_months"), ("methods", "naive,regression,ipw,aipw"),
        ("terms", "spend_pre^2"), ("history", "history.jsonl"), ("draws", "50"), ("json", "out.json"),
        ("quiet", None)),
        ("experiment.csv", "pool.csv")),
    Base("plan-series", "plan forecast", _f(
        ("data", "app_daily.csv"), ("time", "date"), ("outcome", "app_orders"), ("controls", "weather_index"),
        ("start", "2026-03-02"), ("season", "7"), ("trend", "level"), ("placebos", "5"), ("lifts", "-5,2,10"),
        ("draws", "100"), ("json", "out.json"), ("quiet", None)),
        ("app_daily.csv",)),
    Base("compare-plasmode", "compare", _f(
        ("plasmode", "members.csv"), ("treatment", "joined"), ("outcome", "spend_90d"),
        ("covariates", "spend_pre,visits_pre,tenure_months"), ("effect", "5"), ("replicates", "5"),
        ("methods", "naive,ipw,aipw"), ("draws", "50"), ("json", "out.json"), ("quiet", None)),
        ("members.csv",)),
    Base("windows-units", "windows", _f(
        ("events", "events.csv"), ("exposures", "exposures.csv"), ("unit", "customer_id"),
        ("exposure", "exposed_at"), ("event-columns", "customer_id,ts,metric,value"),
        ("population", "exposures-and-events"), ("launch", "2026-01-10T09:00:00Z"),
        ("window", "pre=pre:7d"), ("window", "out=forward:7d"), ("metric", "order=sum,count"),
        ("metric", "visit=count,active_days"), ("allow-negative", "refund"), ("from", "2026-01-01T00:00:00Z"),
        ("until", "2026-01-22T00:00:00Z"), ("series", "daily"), ("output", "units.csv"),
        ("series-output", "series.csv"), ("quiet", None)),
        ("events.csv", "exposures.csv")),
    Base("windows-tz", "windows", _f(
        ("events", "events.csv"), ("exposures", "exposures.csv"), ("unit", "customer_id"),
        ("exposure", "exposed_at"), ("event-columns", "customer_id,ts,metric,value"),
        ("population", "exposures-and-events"), ("reference", "2026-01-10T00:00:00Z"), ("tz", "+02:00"),
        ("anchoring", "day-start"), ("window", "pre=pre:7d"), ("window", "calendar:14d"),
        ("window", "deferred:1d+7d"), ("metric", "order=sum,mean_per_active_day,any"), ("metric", "visit=count"),
        ("ratio", "aov=order/visit"), ("bad-rows", "skip"), ("from", "2026-01-01T00:00:00Z"),
        ("until", "2026-01-22T00:00:00Z"), ("series", "weekly"), ("output", "units.parquet"),
        ("series-output", "series.csv"), ("quiet", None)),
        ("events.csv", "exposures.csv")),
    Base("run-study", "run", _f(("out", "out"), ("quiet", None)),
         (STUDY, "app_daily.csv", "calendar.csv", "regions_weekly.csv", "members.csv", "experiment.csv", "pool.csv"),
         (STUDY,)),
    Base("inspect-panel", "inspect", _f(
        ("data", "regions_weekly.csv"), ("shape", "panel"), ("unit", "region"), ("time", "week"),
        ("outcome", "revenue"), ("covariates", "store_count,population_k"), ("treated", "Fernbury,Highcrag"),
        ("start", "2026-04-06"), ("json", "out.json")),
        ("regions_weekly.csv",)),
    Base("inspect-units", "inspect", _f(
        ("data", "members.csv"), ("shape", "units"), ("id", "customer_id"), ("treatment", "joined"),
        ("covariates", "spend_pre,visits_pre,tenure_months"), ("categorical", "region,age_band"),
        ("outcome", "spend_90d"), ("json", "out.json")),
        ("members.csv",)),
]


def base_study() -> dict:
    """The study the `run` cases start from (structure; emitted as TOML by emit_toml)."""
    return {
        "title": "Fuzz study over the Fernhill demo inputs",
        "summary": "Four quick analyses of the demo data, mutated by scripts/fuzz.py.",
        "defaults": {"level": 0.9, "seed": 7, "draws": 100},
        "questions": {
            "app-orders": "Did the app feature raise daily app orders?",
            "loyalty": "How much more do loyalty members spend because of the scheme?",
        },
        "analysis": [
            {"name": "app-harmonic", "question": "app-orders", "verb": "forecast",
             "describe": "Daily app orders against a harmonic forecast", "truth": 0.02778, "truth_of": "relative",
             "flags": {"data": "app_daily.csv", "time": "date", "outcome": "app_orders",
                       "controls": "catalogue_orders,weather_index", "events": "calendar.csv",
                       "start": "2026-03-02", "model": "harmonic", "log": True}},
            {"name": "sale-weights", "question": "regional-sale", "verb": "synthetic",
             "describe": "Sale regions against a synthetic control",
             "flags": {"data": "regions_weekly.csv", "unit": "region", "time": "week", "outcome": "revenue",
                       "treated": "Fernbury,Highcrag", "start": "2026-04-06", "end": "2026-05-11",
                       "method": "weights"}},
            {"name": "loyalty-ipw", "question": "loyalty", "verb": "match", "truth": 6.0, "truth_of": "average",
             "flags": {"data": "members.csv", "treatment": "joined", "outcome": "spend_90d",
                       "covariates": "spend_pre,visits_pre,tenure_months,region,age_band",
                       "categorical": "region,age_band", "method": "ipw", "rope": "1"}},
            {"name": "past-test-compare", "verb": "compare", "truth": 4.0, "truth_of": "average",
             "flags": {"experiment": "experiment.csv", "arm": "arm", "outcome": "spend_90d", "pool": "pool.csv",
                       "covariates": "spend_pre,visits_pre,tenure_months", "methods": "naive,regression,ipw"}},
        ],
    }


# ---------------------------------------------------------------------------------------------
# TOML emitter (the standard library reads TOML but does not write it).
# ---------------------------------------------------------------------------------------------


class Raw(str):
    """A TOML token written verbatim (datetimes, nan, hex integers, ...)."""


def toml_str(s: str) -> str:
    out = ['"']
    for ch in s:
        o = ord(ch)
        if ch == '"':
            out.append('\\"')
        elif ch == "\\":
            out.append("\\\\")
        elif o < 0x20 or o == 0x7F:
            out.append("\\u%04x" % o)
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def toml_key(k) -> str:
    k = str(k)
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else toml_str(k)


def toml_val(v) -> str:
    if isinstance(v, Raw):
        return str(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if v != v:
            return "nan"
        if v in (float("inf"), float("-inf")):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return toml_str(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_val(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_val(x)}" for k, x in v.items()) + " }"
    return toml_str(str(v))


def emit_toml(st: dict) -> bytes:
    out, tables = [], []
    an = st.get("analysis")
    an_blocks = isinstance(an, list) and an and all(isinstance(a, dict) for a in an)
    for k, v in st.items():
        if k == "analysis" and an_blocks:
            continue
        if isinstance(v, dict):
            tables.append((k, v))
        else:
            out.append(f"{toml_key(k)} = {toml_val(v)}")
    for k, v in tables:
        out += ["", f"[{toml_key(k)}]"]
        out += [f"{toml_key(k2)} = {toml_val(v2)}" for k2, v2 in v.items()]
    if an_blocks:
        for a in an:
            out += ["", "[[analysis]]"]
            sub = []
            for k, v in a.items():
                if isinstance(v, dict):
                    sub.append((k, v))
                else:
                    out.append(f"{toml_key(k)} = {toml_val(v)}")
            for k, v in sub:
                out.append(f"[analysis.{toml_key(k)}]")
                out += [f"{toml_key(k2)} = {toml_val(v2)}" for k2, v2 in v.items()]
    return ("\n".join(out) + "\n").encode("utf-8", "surrogateescape")


# ---------------------------------------------------------------------------------------------
# Value pools.
# ---------------------------------------------------------------------------------------------

NONUTF8 = os.fsdecode(b"\xff\xfe\xc3(")  # surrogate-escaped: reaches the child as raw bytes
GENERIC_VALUES = ["", " ", "0", "-1", "-0", "1e308", "nan", "inf", "x", "x" * 5000, "\x1b[31mred\x1b[0m",
                  "\u202eevil", NONUTF8, "--", "-", "1,2,,3", "../" + CASE_DIR_NAME + "/members.csv"]

# Values that the verb should reject (or handle) quickly.
FLAG_VALUES = {
    "draws": ["0", "1", "9", "-1", "1e12", "10000001", "10000000000", "nan", "1.5", "", "0x10", "+20"],
    "level": ["0", "1", "1.5", "-0.1", "1e-320", "0.9999999999", "nan", "inf", "", "0.5", "90%"],
    "rope": ["nonsense", "", "%", "1%:1%", "-0%:0%", "0", "0%", "1e308", "inf", "inf%", "-inf:inf", "1%:-1%",
             "-2%:1%", "100000%", "-10:30", "1:2:3", "%1", "nan%", "1e-320", "-1%", "1%%", ":", "1%:"],
    "threshold": ["nan", "inf", "1e308", "-1e308", "0", "-0", "x", "", "-1"],
    "seed": ["0", "-1", "18446744073709551615", "18446744073709551616", "1.5", "x", ""],
    "threads": ["0", "1", "1025", "100000", "-1", "x", ""],
    "replicates": ["0", "1", "2", "10000000000", "-1", "1e3", "x", "4294967296"],
    "placebos": ["0", "1", "2", "-1", "x", "1000000000"],
    "folds": ["0", "21", "1000", "-1", "x"],
    "washout": ["1", "600", "100000", "-1", "18446744073709551615"],
    "season": ["0", "1", "2", "7:0", "7:100", "7:3", "100000", "1.5", "nan", "-7", "7:", "x", "0.5:1",
               "365.25:1000", "365.25:4", "1e308", "2:1", "inf"],
    "model": ["bogus", "", "STRUCTURAL", "local-level", "holt-winters", "harmonic", "structural,harmonic"],
    "trend": ["bogus", "", "damped-trend", "linear-trend"],
    "hw-seasonality": ["bogus", "multiplicative", ""],
    "method": ["bogus", "", "IPW", "ipw,aipw", "weights", "predictors", "intercept", "ridge", "sdid",
               "nearest", "strata", "overlap", "aipw"],
    "methods": ["bogus", "", "naive,,ipw", "ipw,ipw", "naive,bogus", "aipw,overlap,strata", ",", "nearest"],
    "estimand": ["ate", "atc", "bogus", ""],
    "caliper": ["none", "0", "-1", "1e308", "nan", "inf", "1e-320", "x", ""],
    "k": ["0", "100", "100000", "-1", "x"],
    "strata": ["0", "1", "2", "10000", "-1"],
    "trim": ["minmax", "crump", "0", "0.5", "0.6", "-1", "1", "nan", "bogus", "1e-320"],
    "penalty": ["-1", "nan", "inf", "1e308", "1e-320", "x"],
    "separation": ["error", "bogus"],
    "outcome-blocks": ["0", "1", "1000", "-1"],
    "ridge-lambda": ["0", "-1", "nan", "inf", "1e308"],
    "placebo-exclude": ["0", "-1", "nan", "1e308"],
    "lifts": ["", "-100", "-1000", "1e308", "nan", "0", "-5,,2", "x", "100000", "-99.9999"],
    "lengths": ["0", "1", "100000", "-1", "", "1,1", "x"],
    "power": ["0", "1", "1.5", "-0.5", "nan"],
    "min-train": ["0", "1", "2", "1000000", "-1"],
    "effect": ["nan", "inf", "1e308", "-1e308", "0", "-5", "x"],
    "allocation": ["0:1", "1:0", "0:0", "nonsense", "0.1:0.9", "-1:2", "nan:nan", "1:1", "0.5", ""],
    "window": ["0d", "-1d", "99999999w", "9223372036854775807s", "calendar:0d", "pre:0d", "deferred:0d+0d",
               "bogus", "", "forward:", "1x", "x=7d", "out=7d", "7", "1s", "pre:99999d", "=7d"],
    "metric": ["order=sum", "order=bogus", "order=", "=sum", "order=sum,sum", "nosuch=sum",
               "order=count,active_days,mean_per_active_day,any", "order", "refund=sum"],
    "ratio": ["aov=order/visit", "aov=order/order", "aov=", "bad", "aov=nosuch/order", "aov=order/"],
    "tz": ["UTC", "+02:00", "-05:30", "+25:00", "+14:00", "-23:59", "bogus", "", "+0200", "Z", "+99:99"],
    "anchoring": ["exact", "day-start", "bogus"],
    "population": ["exposures", "exposures-and-events", "bogus"],
    "bad-rows": ["error", "skip", "bogus", "fail"],
    "series": ["daily", "weekly", "monthly", ""],
    "engine": ["spark", "bogus"],
    "emit-sql": ["spark", "postgres"],
    "shape": ["table", "series", "panel", "wide-panel", "units", "bogus"],
    "min-pre": ["0", "1", "100000", "-1"],
    "date-format": ["%Y-%m-%d", "%d/%m/%Y", "%", "%Q", "", "%s", "%Y", "%Y-%m-%d %H:%M", "%%", "%Y-%m-%dT%H:%M:%SZ"],
    "missing": ["error", "keep", "drop-row", "bogus"],
    "gaps": ["error", "fill", "bogus"],
}
TIME_VALUES = ["2026-03-02", "2024-01-01", "2023-01-01", "2030-01-01", "2026-02-30", "bogus", "", "0", "-1",
               "2026-06-30", "2026-04-06", "9999-12-31", "2026-03-02T00:00:00Z", "2026-06-22", "20260302"]
INSTANT_VALUES = ["2026-01-01T00:00:00Z", "2030-01-01", "1970-01-01T00:00:00Z", "0000-01-01", "9999-12-31T23:59:59Z",
                  "bogus", "", "2026-02-30", "2026-01-22T00:00:00Z", "2026-01-10T24:00:00Z",
                  "2026-01-10T09:00:00+99:00", "2026-01-10 09:00", "262143-01-01"]
for _k in ("start", "end"):
    FLAG_VALUES[_k] = TIME_VALUES
for _k in ("from", "until", "launch", "reference"):
    FLAG_VALUES[_k] = INSTANT_VALUES

COLUMN_FLAGS = {"time", "outcome", "controls", "unit", "treatment", "covariates", "categorical", "id", "arm",
                "exact", "squares", "predictors", "size", "pre-outcome", "log-controls", "donors", "treated-arm",
                "control-arm", "exposure", "group", "interact", "terms", "event-columns", "allow-negative",
                "treated", "exclude"}
INPUT_FLAGS = {"data", "events", "exposures", "experiment", "pool", "plasmode", "unit-list", "arms-data",
               "summarize"}
OUTPUT_FLAGS = {"json", "out", "output", "series-output", "sidecar", "partial", "history", "spark-work",
                "spark-output"}
NEVER_TOUCH = {"help", "version", "spark-submit", "spark-master"}
NUMERIC_FLAGS = {"draws", "level", "seed", "threads", "replicates", "placebos", "folds", "washout", "k", "strata",
                 "penalty", "caliper", "trim", "outcome-blocks", "ridge-lambda", "placebo-exclude", "lifts",
                 "lengths", "power", "min-train", "effect", "allocation", "threshold", "min-pre", "rope",
                 "season"}
NAME_FLAGS = {"method", "methods", "model", "trend", "hw-seasonality", "estimand", "separation", "shape",
              "engine", "emit-sql", "anchoring", "population", "bad-rows", "series", "missing", "gaps"}

# ---------------------------------------------------------------------------------------------
# File mutations (bytes in, bytes out; deterministic given the rng).
# ---------------------------------------------------------------------------------------------

NUM_RE = re.compile(rb"^\s*-?\d+(\.\d+)?\s*$")
DATE_RE = re.compile(rb"^\d{4}-\d{2}-\d{2}")
SPECIAL_NUMBERS = [b"NaN", b"nan", b"inf", b"-inf", b"Infinity", b"1e308", b"1e309", b"-1e308", b"-0", b"0", b"",
                   b"  ", b"4.9e-324", b"1e-320", b"9007199254740993", b"1e19", b"-1", b"0x1F", b"1_000", b"+5",
                   b".", b"-", b"1e", b"\xd9\xa1\xd9\xa2", b"5 ", b" 5", b"TRUE", b"null", b"NA", b"1.7976931348623157e308",
                   b"-9223372036854775808", b"18446744073709551616", b"1e-400", b"0.1e1000"]
WEIRD_DATES = [b"2026-02-30", b"2026-13-01", b"0000-01-01", b"9999-12-31", b"-0001-01-01", b"2026-3-2", b"20260302",
               b"2026-03-02T25:00:00Z", b"2026-03-02T00:00:60Z", b"2026-03-02 ", b"1e308", b"99999999999999999999",
               b"2026-03-02T00:00:00+99:99", b"2026-W10-1", b"", b"\xff", b"2026-03-02T00:00:00.9999999999999Z",
               b"262144-01-01", b"1969-12-31T23:59:59Z", b"2024-02-29", b"2023-02-29"]
CONTROL_BYTES = [b"\x00", b"\x1b[31m", b"\x1b]0;pwned\x07", b"\x1b[2J\x1b[H", b"\x08\x08\x08", b"\x7f",
                 "\u202e".encode(), b"\x0b", b"\x0c", b"\t", b"\r", b"\x1b", "\u2028".encode(), b"\x85"]
NONUTF8_BYTES = [b"\xff", b"\xfe\xff", b"\xc3\x28", b"\xed\xa0\x80", b"\xf4\x90\x80\x80", b"\xc0\xaf", b"\x80",
                 b"\xe2\x82", b"\xf0\x9f\x98"]


def _lines(d: bytes):
    return d.split(b"\n")


def _data_idx(ls):
    return [i for i in range(1, len(ls)) if ls[i].strip(b"\r") != b""]


def _pick_row(rng, ls):
    idx = _data_idx(ls)
    return rng.choice(idx) if idx else 0


def _cells(line: bytes):
    return line.split(b",")


def _numeric_cols(ls):
    if len(ls) < 2:
        return []
    row = _cells(ls[1])
    return [j for j, c in enumerate(row) if NUM_RE.match(c)]


def _date_cols(ls):
    if len(ls) < 2:
        return []
    row = _cells(ls[1])
    return [j for j, c in enumerate(row) if DATE_RE.match(c)]


def _set_cell(line: bytes, j: int, v: bytes) -> bytes:
    c = _cells(line)
    if j < len(c):
        c[j] = v
    return b",".join(c)


def m_byte_flip(rng, d):
    if not d:
        return b"\xff", "byte-flip on empty file"
    a = bytearray(d)
    n = rng.randint(1, 8)
    where = []
    for _ in range(n):
        p = rng.randrange(len(a))
        a[p] ^= rng.randint(1, 255)
        where.append(p)
    return bytes(a), f"byte-flip x{n} at offsets {sorted(where)[:8]}"


def m_truncate(rng, d):
    ls = _lines(d)
    mode = rng.choice(["zero", "newline", "header-only", "header-no-newline", "random", "mid-last-line"])
    if mode == "zero":
        return b"", "truncate to 0 bytes"
    if mode == "newline":
        return b"\n\n", "truncate to blank lines"
    if mode == "header-only":
        return ls[0] + b"\n", "truncate to the header line"
    if mode == "header-no-newline":
        return ls[0], "truncate to the header without a newline"
    if mode == "mid-last-line":
        cut = max(1, len(d) - rng.randint(2, 20))
        return d[:cut], f"truncate inside the last line (at {cut} of {len(d)} bytes)"
    cut = rng.randrange(1, max(2, len(d)))
    return d[:cut], f"truncate at byte {cut} of {len(d)}"


def m_delete_lines(rng, d):
    ls = _lines(d)
    k = rng.choice([1, 1, 2, 5, 20, 200])
    drop = set()
    if rng.random() < 0.2:
        drop.add(0)
    idx = _data_idx(ls)
    for _ in range(min(k, len(idx))):
        drop.add(rng.choice(idx))
    out = [x for i, x in enumerate(ls) if i not in drop]
    return b"\n".join(out), f"delete {len(drop)} line(s){' incl. the header' if 0 in drop else ''}"


def m_duplicate_lines(rng, d):
    ls = _lines(d)
    k = rng.choice([1, 1, 3, 10])
    out = list(ls)
    picks = []
    for _ in range(k):
        i = _pick_row(rng, out)
        out.insert(i, out[i])
        picks.append(i)
    if rng.random() < 0.15:
        out.insert(1, out[0])
        picks.append(0)
    return b"\n".join(out), f"duplicate {len(picks)} line(s) (e.g. line {picks[0] + 1})"


def m_swap_lines(rng, d):
    ls = _lines(d)
    idx = _data_idx(ls)
    if len(idx) < 2:
        return d + b"\n" + d, "swap lines (too short: doubled the file)"
    mode = rng.choice(["swap", "reverse", "header-last"])
    if mode == "reverse":
        body = [ls[i] for i in idx][::-1]
        return b"\n".join([ls[0]] + body) + b"\n", "reverse the data rows"
    if mode == "header-last":
        body = [ls[i] for i in idx]
        return b"\n".join(body + [ls[0]]) + b"\n", "move the header to the end"
    a, b = rng.sample(idx, 2)
    ls = list(ls)
    ls[a], ls[b] = ls[b], ls[a]
    return b"\n".join(ls), f"swap lines {a + 1} and {b + 1}"


def m_swap_columns(rng, d):
    ls = _lines(d)
    hdr = _cells(ls[0])
    if len(hdr) < 2:
        return d, "swap columns (one column: unchanged)"
    i, j = rng.sample(range(len(hdr)), 2)
    header_only = rng.random() < 0.5
    out = []
    for n, line in enumerate(ls):
        if n > 0 and header_only:
            out.append(line)
            continue
        c = _cells(line)
        if max(i, j) < len(c):
            c[i], c[j] = c[j], c[i]
        out.append(b",".join(c))
    what = "in the header only" if header_only else "in every row"
    return b"\n".join(out), f"swap columns {i + 1} and {j + 1} ({hdr[i].decode(errors='replace')}/{hdr[j].decode(errors='replace')}) {what}"


def m_insert_quote(rng, d):
    ls = list(_lines(d))
    r = 0 if rng.random() < 0.2 else _pick_row(rng, ls)
    c = _cells(ls[r])
    j = rng.randrange(len(c))
    mode = rng.choice(["lone", "lone-start", "comma-inside", "newline-inside", "doubled", "quoted-number", "trailing"])
    if mode == "lone":
        p = rng.randrange(len(c[j]) + 1)
        c[j] = c[j][:p] + b'"' + c[j][p:]
    elif mode == "lone-start":
        c[j] = b'"' + c[j]
    elif mode == "comma-inside":
        c[j] = b'"' + c[j] + b',extra"'
    elif mode == "newline-inside":
        c[j] = b'"' + c[j] + b'\nmore"'
    elif mode == "doubled":
        c[j] = b'"' + c[j] + b'""x"'
    elif mode == "quoted-number":
        c[j] = b'"' + c[j] + b'"'
    else:
        c[j] = c[j] + b'"'
    ls[r] = b",".join(c)
    return b"\n".join(ls), f"quote ({mode}) in line {r + 1}, column {j + 1}"


def m_crlf(rng, d):
    mode = rng.choice(["crlf", "cr-only", "mixed", "crcrlf"])
    if mode == "crlf":
        return d.replace(b"\n", b"\r\n"), "CRLF line endings"
    if mode == "cr-only":
        return d.replace(b"\n", b"\r"), "CR-only line endings"
    if mode == "crcrlf":
        return d.replace(b"\n", b"\r\r\n"), "CR CR LF line endings"
    ls = _lines(d)
    return b"\n".join(x + (b"\r" if i % 2 else b"") for i, x in enumerate(ls)), "CRLF on every other line"


def m_bom(rng, d):
    mode = rng.choice(["utf8", "utf8-twice", "utf16", "utf8-mid"])
    if mode == "utf8":
        return b"\xef\xbb\xbf" + d, "UTF-8 BOM"
    if mode == "utf8-twice":
        return b"\xef\xbb\xbf\xef\xbb\xbf" + d, "two UTF-8 BOMs"
    if mode == "utf8-mid":
        ls = list(_lines(d))
        r = _pick_row(rng, ls)
        ls[r] = b"\xef\xbb\xbf" + ls[r]
        return b"\n".join(ls), f"UTF-8 BOM at the start of line {r + 1}"
    return b"\xff\xfe" + d.decode("utf-8", "replace").encode("utf-16-le"), "UTF-16LE with BOM"


def m_huge_cell(rng, d):
    ls = list(_lines(d))
    n = rng.choice([10_000, 1_000_000, 8_000_000])
    mode = rng.choice(["letters", "digits", "big-number", "open-quote", "wide-header", "many-rows", "comma-line"])
    if mode == "wide-header":
        k = rng.choice([1000, 100_000])
        ls[0] = ls[0] + b"".join(b",c%d" % i for i in range(k))
        return b"\n".join(ls), f"{k} extra header columns"
    if mode == "many-rows":
        body = [ls[i] for i in _data_idx(ls)]
        times = 20 if len(d) < 2_000_000 else 4
        return b"\n".join([ls[0]] + body * times) + b"\n", f"data rows repeated x{times}"
    if mode == "comma-line":
        r = _pick_row(rng, ls)
        ls[r] = b"," * n
        return b"\n".join(ls), f"line {r + 1} replaced by {n} commas"
    r = 0 if rng.random() < 0.15 else _pick_row(rng, ls)
    c = _cells(ls[r])
    j = rng.randrange(len(c))
    c[j] = {"letters": b"x" * n, "digits": b"9" * n, "big-number": b"1" + b"0" * n,
            "open-quote": b'"' + b"a" * n}[mode]
    ls[r] = b",".join(c)
    return b"\n".join(ls), f"huge cell ({mode}, {n} bytes) at line {r + 1}, column {j + 1}"


def m_control_chars(rng, d):
    ls = list(_lines(d))
    r = 0 if rng.random() < 0.2 else _pick_row(rng, ls)
    c = _cells(ls[r])
    j = rng.randrange(len(c))
    cc = rng.choice(CONTROL_BYTES)
    p = rng.randrange(len(c[j]) + 1)
    c[j] = c[j][:p] + cc + c[j][p:]
    ls[r] = b",".join(c)
    return b"\n".join(ls), f"control bytes {cc!r} in line {r + 1}, column {j + 1}"


def m_special_numbers(rng, d):
    ls = list(_lines(d))
    cols = _numeric_cols(ls)
    if not cols:
        return m_control_chars(rng, d)
    j = rng.choice(cols)
    v = rng.choice(SPECIAL_NUMBERS)
    mode = rng.choice(["cells", "cells", "column", "row"])
    idx = _data_idx(ls)
    if mode == "column":
        for i in idx:
            ls[i] = _set_cell(ls[i], j, v)
        where = f"every row of column {j + 1}"
    elif mode == "row":
        r = rng.choice(idx)
        for jj in cols:
            ls[r] = _set_cell(ls[r], jj, v)
        where = f"every numeric cell of line {r + 1}"
    else:
        rows = sorted({rng.choice(idx) for _ in range(rng.randint(1, 5))})
        for r in rows:
            ls[r] = _set_cell(ls[r], j, v)
        where = f"column {j + 1}, line(s) {[r + 1 for r in rows]}"
    return b"\n".join(ls), f"value {v!r} in {where}"


def m_non_utf8(rng, d):
    ls = list(_lines(d))
    r = 0 if rng.random() < 0.25 else _pick_row(rng, ls)
    c = _cells(ls[r])
    j = rng.randrange(len(c))
    b = rng.choice(NONUTF8_BYTES)
    c[j] = c[j] + b
    ls[r] = b",".join(c)
    return b"\n".join(ls), f"non-UTF-8 bytes {b!r} in line {r + 1}, column {j + 1}"


def m_headers(rng, d):
    ls = list(_lines(d))
    h = _cells(ls[0])
    mode = rng.choice(["duplicate", "empty", "spaces", "case", "all-same", "drop-header"])
    if mode == "drop-header":
        return b"\n".join(ls[1:]), "header line removed"
    if len(h) < 2 and mode in ("duplicate", "all-same"):
        mode = "empty"
    if mode == "duplicate":
        i, j = rng.sample(range(len(h)), 2)
        h[j] = h[i]
        what = f"header cell {j + 1} renamed to {h[i].decode(errors='replace')!r} (duplicate)"
    elif mode == "all-same":
        h = [h[0]] * len(h)
        what = "every header cell equal"
    else:
        j = rng.randrange(len(h))
        old = h[j]
        h[j] = {"empty": b"", "spaces": b"  " + old + b" ", "case": old.upper()}[mode]
        what = f"header cell {j + 1} {mode} ({old.decode(errors='replace')!r} -> {h[j].decode(errors='replace')!r})"
    ls[0] = b",".join(h)
    return b"\n".join(ls), what


def m_fields(rng, d):
    ls = list(_lines(d))
    mode = rng.choice(["extra", "missing", "trailing-comma-all", "header-extra", "empty-row-fields", "tab-separated"])
    if mode == "trailing-comma-all":
        return b"\n".join(x + b"," if x else x for x in ls), "trailing comma on every line"
    if mode == "header-extra":
        ls[0] = ls[0] + b",extra"
        return b"\n".join(ls), "extra header column, rows unchanged"
    if mode == "tab-separated":
        return d.replace(b",", b"\t"), "tab-separated instead of commas"
    r = _pick_row(rng, ls)
    if mode == "extra":
        ls[r] = ls[r] + b",extra"
    elif mode == "missing":
        ls[r] = ls[r].rsplit(b",", 1)[0]
    else:
        ls[r] = b"," * (len(_cells(ls[0])) - 1)
    return b"\n".join(ls), f"{mode} field(s) on line {r + 1}"


def m_blank_lines(rng, d):
    ls = list(_lines(d))
    mode = rng.choice(["blank", "spaces", "comment", "whitespace-cells", "trailing-blank"])
    if mode == "trailing-blank":
        return d + b"\n\n\n", "blank lines at the end"
    if mode == "whitespace-cells":
        return b"\n".join(b", ".join(_cells(x)) for x in ls), "a space after every comma"
    r = _pick_row(rng, ls)
    ls.insert(r, {"blank": b"", "spaces": b"   ", "comment": b"# a comment"}[mode])
    return b"\n".join(ls), f"{mode} line inserted before line {r + 1}"


def m_dates(rng, d):
    ls = list(_lines(d))
    cols = _date_cols(ls)
    if not cols:
        return m_special_numbers(rng, d)
    j = rng.choice(cols)
    v = rng.choice(WEIRD_DATES)
    idx = _data_idx(ls)
    if rng.random() < 0.2:
        for i in idx:
            ls[i] = _set_cell(ls[i], j, v)
        return b"\n".join(ls), f"date {v!r} in every row of column {j + 1}"
    r = rng.choice(idx)
    ls[r] = _set_cell(ls[r], j, v)
    return b"\n".join(ls), f"date {v!r} at line {r + 1}, column {j + 1}"


def m_constant_column(rng, d):
    ls = list(_lines(d))
    idx = _data_idx(ls)
    if not idx:
        return m_truncate(rng, d)
    ncol = len(_cells(ls[idx[0]]))
    j = rng.randrange(ncol)
    v = _cells(ls[idx[0]])[j] if j < len(_cells(ls[idx[0]])) else b""
    for i in idx:
        ls[i] = _set_cell(ls[i], j, v)
    return b"\n".join(ls), f"column {j + 1} constant ({v[:40]!r})"


def m_fake_container(rng, d):
    mode = rng.choice(["parquet-junk", "parquet-huge-footer", "gzip-junk", "zeros"])
    if mode == "parquet-junk":
        return b"PAR1" + bytes(rng.randrange(256) for _ in range(200)) + b"PAR1", "random bytes between Parquet magics"
    if mode == "parquet-huge-footer":
        return b"PAR1" + b"\x00" * 64 + struct.pack("<I", 0xFFFFFFF0) + b"PAR1", "Parquet footer length 0xFFFFFFF0"
    if mode == "gzip-junk":
        return b"\x1f\x8b\x08\x00" + bytes(rng.randrange(256) for _ in range(100)), "gzip magic then junk"
    return b"\x00" * 4096, "4096 NUL bytes"


FILE_MUTATORS = [
    ("byte-flip", m_byte_flip, 3), ("truncate", m_truncate, 2), ("delete-lines", m_delete_lines, 2),
    ("duplicate-lines", m_duplicate_lines, 2), ("swap-lines", m_swap_lines, 1), ("swap-columns", m_swap_columns, 2),
    ("quotes", m_insert_quote, 2), ("line-endings", m_crlf, 2), ("bom", m_bom, 2), ("huge-cell", m_huge_cell, 1),
    ("control-chars", m_control_chars, 2), ("special-numbers", m_special_numbers, 4), ("non-utf8", m_non_utf8, 2),
    ("headers", m_headers, 2), ("fields", m_fields, 2), ("blank-lines", m_blank_lines, 1), ("dates", m_dates, 3),
    ("constant-column", m_constant_column, 1), ("fake-container", m_fake_container, 1),
]

# ---------------------------------------------------------------------------------------------
# Cases.
# ---------------------------------------------------------------------------------------------


@dataclass
class Case:
    idx: int
    base: Base
    verb: str
    flags: list  # [flag, value or None]
    positionals: list
    files: dict  # name -> bytes (inputs written into the case folder)
    nodes: dict = field(default_factory=dict)  # name -> "devnull" | "dir" | "nonempty-dir"
    study: dict | None = None
    muts: list = field(default_factory=list)  # (category, name, detail)

    def args(self) -> list:
        a = self.verb.split() + list(self.positionals)
        for f, v in self.flags:
            if f.startswith("\0raw:"):
                a.append(f[5:])
                continue
            a.append("--" + f)
            if v is not None:
                a.append(v)
        return a

    def mutation_text(self) -> str:
        return "; ".join(f"{c}/{n}: {d}" for c, n, d in self.muts) or "none (baseline)"


class Ctx:
    def __init__(self, bin_path: Path, pristine: dict, helps: dict, seed: int):
        self.bin = bin_path
        self.pristine = pristine  # name -> bytes
        self.helps = helps  # verb -> (flags {name: takes_value}, required [names])
        self.seed = seed
        headers = set()
        for name, data in pristine.items():
            if name.endswith(".csv"):
                headers.update(c.decode(errors="replace") for c in _cells(_lines(data)[0]))
        self.headers = sorted(headers)
        regions = set()
        for line in _lines(pristine["regions_weekly.csv"])[1:]:
            if line:
                regions.add(line.split(b",")[0].decode())
        self.regions = sorted(regions)


def column_value(rng, ctx, flag, current):
    h = ctx.headers
    if flag in ("treated", "exclude"):
        return rng.choice(["Nowhere", "Fernbury,Fernbury", "", ",", ",".join(ctx.regions), "fernbury",
                           ",".join(ctx.regions[:-1]), " Fernbury", "Fernbury,Nowhere"])
    if flag == "terms":
        return rng.choice(["spend_pre^2", "spend_pre^100", "zero(spend_pre)", "spend_pre:visits_pre", "^2",
                           "nosuch^2", "spend_pre^-1", "spend_pre^0", "zero()", "spend_pre^2:visits_pre^2:tenure_months",
                           "spend_pre^1e308", ""])
    if flag == "event-columns":
        return rng.choice(["unit,time,metric,value", "customer_id,ts,metric", "a,b,c,d",
                           "customer_id,customer_id,metric,value", "", "ts,customer_id,metric,value",
                           "customer_id,ts,value,metric"])
    opts = [rng.choice(h), ",".join(rng.sample(h, min(3, len(h)))), "nosuch", "", ",", " " + rng.choice(h),
            rng.choice(h).upper(), (current or rng.choice(h)) + "," + (current or rng.choice(h)), ",".join(h),
            "x" * 300]
    return rng.choice(opts)


def ensure_node(case, name, kind):
    case.nodes[name] = kind
    return name


def output_value(rng, case, flag):
    """An output path that tests the writer: an input, a missing folder, a directory, a device."""
    inputs = [n for n in case.files]
    kinds = ["input", "input", "missing-folder", "directory", "devnull", "empty", "trailing-slash", "nonempty-dir"]
    kind = rng.choice(kinds)
    if kind == "devnull" and not IS_ROOT:
        kind = "missing-folder"
    if kind == "input" and inputs:
        return rng.choice(inputs), "an input file"
    if kind == "missing-folder" or (kind == "input" and not inputs):
        return ("no-such-dir/deeper/" + ("out" if flag in ("out", "spark-work", "spark-output") else "x.json"),
                "a missing folder")
    if kind == "directory":
        return rng.choice([".", ensure_node(case, "emptydir", "dir")]), "a directory"
    if kind == "devnull":
        return ensure_node(case, "devnull", "devnull"), "a character device (stand-in for /dev/null)"
    if kind == "nonempty-dir":
        return ensure_node(case, "nonempty", "nonempty-dir"), "a non-empty folder"
    if kind == "empty":
        return "", "an empty path"
    return "x.json/", "a path with a trailing slash"


def input_value(rng, case, flag):
    names = sorted(case.files)
    src = rng.choice(names) if names else "members.csv"
    kind = rng.choice(["other-input", "missing", "directory", "devnull", "as-parquet", "as-gz", "study", "dotdot",
                       "empty-name"])
    if kind == "devnull" and not IS_ROOT:
        kind = "missing"
    if kind == "other-input":
        return rng.choice(names + ["members.csv"]), "another input"
    if kind == "missing":
        return "no-such-file.csv", "a missing file"
    if kind == "directory":
        return rng.choice([".", ensure_node(case, "emptydir", "dir")]), "a directory"
    if kind == "devnull":
        return ensure_node(case, "devnull", "devnull"), "a character device (empty)"
    if kind == "as-parquet":
        data = case.files.get(src, b"")
        case.files["copy.parquet"] = data
        return "copy.parquet", f"{src} copied to a .parquet name"
    if kind == "as-gz":
        data = case.files.get(src, b"")
        gz = gzip.compress(data, mtime=0)
        choice = rng.choice(["valid", "truncated", "plain"])
        case.files["copy.csv.gz"] = {"valid": gz, "truncated": gz[: max(10, len(gz) // 2)], "plain": data}[choice]
        return "copy.csv.gz", f"{src} as a {choice} .gz"
    if kind == "study":
        return STUDY if STUDY in case.files else "no-such.toml", "the study file"
    if kind == "dotdot":
        return f"../{CASE_DIR_NAME}/{src}", "a ../ path to an input"
    return "", "an empty path"


def value_for(rng, ctx, case, flag, current=None):
    if flag in OUTPUT_FLAGS:
        v, what = output_value(rng, case, flag)
        return v, what
    if flag in INPUT_FLAGS:
        return input_value(rng, case, flag)
    if flag in COLUMN_FLAGS:
        v = column_value(rng, ctx, flag, current)
        return v, "column names"
    if flag in FLAG_VALUES and FLAG_VALUES[flag]:
        return rng.choice(FLAG_VALUES[flag]), "out-of-range or unknown value"
    return rng.choice(GENERIC_VALUES), "generic odd value"


def flag_mutation(rng, ctx, case):
    helps, required = ctx.helps[case.verb]
    present = [i for i, (f, _) in enumerate(case.flags) if not f.startswith("\0")]
    kind = rng.choices(
        ["drop", "value", "numbers", "names", "output", "input", "add", "unknown", "duplicate"],
        weights=[3, 3, 4, 2, 4, 2, 3, 1, 1])[0]
    if kind == "drop":
        if case.verb == "run" and case.positionals and rng.random() < 0.3:
            case.positionals.clear()
            return kind, "drop the study file argument"
        req = [i for i in present if case.flags[i][0] in required]
        pool = req if req and rng.random() < 0.6 else present
        if not pool:
            return kind, "nothing to drop"
        i = rng.choice(pool)
        f = case.flags.pop(i)[0]
        return kind, f"drop --{f}{' (required)' if f in required else ''}"
    if kind in ("numbers", "names"):
        want = NUMERIC_FLAGS if kind == "numbers" else NAME_FLAGS
        cands = sorted(f for f, tv in helps.items() if tv and f in want)
        if not cands:
            kind = "value"
        else:
            f = rng.choice(cands)
            v = rng.choice(FLAG_VALUES.get(f) or GENERIC_VALUES)
            for i in present:
                if case.flags[i][0] == f:
                    case.flags[i] = [f, v]
                    break
            else:
                case.flags.append([f, v])
            return kind, f"--{f} {v!r}"
    if kind == "output":
        outs = sorted(f for f in helps if f in OUTPUT_FLAGS and f not in ("spark-output",))
        if not outs:
            kind = "value"
        else:
            f = rng.choice(outs)
            v, what = output_value(rng, case, f)
            for i in present:
                if case.flags[i][0] == f:
                    case.flags[i] = [f, v]
                    break
            else:
                case.flags.append([f, v])
            extra = ""
            if f == "out" and rng.random() < 0.5 and not any(x[0] == "force" for x in case.flags):
                case.flags.append(["force", None])
                extra = " with --force"
            return kind, f"--{f} {v!r} ({what}){extra}"
    if kind == "input":
        ins = [i for i in present if case.flags[i][0] in INPUT_FLAGS]
        if case.verb == "run" and (not ins or rng.random() < 0.5):
            v, what = input_value(rng, case, "study")
            if case.positionals:
                case.positionals[0] = v
            else:
                case.positionals.append(v)
            if rng.random() < 0.2:
                case.positionals.append(STUDY)
                what += ", and a second study argument"
            return kind, f"study argument {v!r} ({what})"
        if not ins:
            kind = "value"
        else:
            i = rng.choice(ins)
            f = case.flags[i][0]
            v, what = input_value(rng, case, f)
            case.flags[i] = [f, v]
            return kind, f"--{f} {v!r} ({what})"
    if kind == "add":
        cands = sorted(f for f in helps if f not in NEVER_TOUCH and all(f != x[0] for x in case.flags))
        if not cands:
            kind = "value"
        else:
            f = rng.choice(cands)
            if helps[f]:
                v, what = value_for(rng, ctx, case, f)
                case.flags.append([f, v])
                return kind, f"add --{f} {v!r} ({what})"
            case.flags.append([f, None])
            return kind, f"add --{f}"
    if kind == "unknown":
        other = sorted({f for verb, (h, _) in ctx.helps.items() for f in h} - set(helps) - NEVER_TOUCH)
        choice = rng.choice(["--no-such-flag", "-x", "---data", "--data=", "--DRAWS"] + ["--" + o for o in other[:40]])
        case.flags.append(["\0raw:" + choice, None])
        if rng.random() < 0.5:
            case.flags.append(["\0raw:value", None])
        return kind, f"unknown flag {choice}"
    if kind == "duplicate":
        if not present:
            return kind, "nothing to duplicate"
        i = rng.choice(present)
        f, v = case.flags[i]
        nv = v if (v is None or rng.random() < 0.5) else value_for(rng, ctx, case, f, v)[0]
        case.flags.append([f, nv])
        return kind, f"--{f} given twice ({v!r}, {nv!r})"
    # value: any present flag with a value gets an odd value
    vals = [i for i in present if case.flags[i][1] is not None]
    if not vals:
        return "value", "no flag with a value"
    i = rng.choice(vals)
    f, cur = case.flags[i]
    v, what = value_for(rng, ctx, case, f, cur)
    case.flags[i] = [f, v]
    return "value", f"--{f} {v!r} ({what})"


# Study mutations operate on the structure before it is written as TOML.
WRONG_VALUES = [5, -1, 1.5, True, False, [1, 2], ["a", 1], {"a": 1}, Raw("1979-05-27T07:32:00Z"), Raw("07:32:00"),
                "text", Raw("nan"), Raw("-inf"), Raw("9223372036854775807"), Raw("0x7fffffff"), [], [[1], [2]], ""]


def _analyses(st):
    an = st.get("analysis")
    if isinstance(an, list):
        return [a for a in an if isinstance(a, dict)]
    return []


def study_mutation(rng, ctx, case):
    st = case.study
    ans = _analyses(st)
    a = rng.choice(ans) if ans else None
    kind = rng.choice(["wrong-type", "unknown-key", "dotdot-path", "long-name", "reserved-flag", "duplicate-name",
                       "remove-required", "weird-verb", "truth", "flag-value", "dash-underscore", "many-analyses",
                       "defaults-extra", "name-chars"])
    if kind == "wrong-type":
        v = rng.choice(WRONG_VALUES)
        target = rng.choice(["title", "summary", "defaults", "defaults.level", "defaults.draws", "defaults.seed",
                             "questions", "questions.app-orders", "analysis", "name", "verb", "truth", "truth_of",
                             "describe", "question", "flags", "flags.value"])
        if "." in target and not target.startswith("flags"):
            t, k = target.split(".", 1)
            if isinstance(st.get(t), dict):
                st[t][k] = v
        elif target in ("title", "summary", "defaults", "questions", "analysis"):
            st[target] = v
        elif a is not None:
            if target == "flags.value" and isinstance(a.get("flags"), dict) and a["flags"]:
                k = rng.choice(sorted(a["flags"]))
                a["flags"][k] = v
                target = f"flags.{k}"
            else:
                a[target] = v
        return kind, f"{target} = {toml_val(v)}"
    if kind == "unknown-key":
        where = rng.choice(["top", "analysis", "flags", "defaults", "questions"])
        key = rng.choice(["colour", "bogus", "Title", "analyses", "no such key", "ü", "flags"])
        if where == "top":
            st[key] = "x"
        elif where in ("defaults", "questions") and isinstance(st.get(where), dict):
            st[where][key] = "x"
        elif a is not None and where == "analysis":
            a[key] = "x" if key != "flags" else {"x": 1}
        elif a is not None and isinstance(a.get("flags"), dict):
            a["flags"][key] = "x"
        return kind, f"unknown key {key!r} in {where}"
    if kind == "dotdot-path":
        if a is None or not isinstance(a.get("flags"), dict):
            return kind, "no analysis to change"
        pk = [k for k in a["flags"] if k in INPUT_FLAGS]
        if not pk:
            return kind, "no path flag"
        k = rng.choice(pk)
        cur = str(a["flags"][k])
        v = rng.choice([f"../{CASE_DIR_NAME}/{cur}", f"../../{cur}", "..", "../", f"a/../../{CASE_DIR_NAME}/{cur}",
                        f"./../{cur}", "../" * 30 + cur])
        a["flags"][k] = v
        return kind, f"{a.get('name')}.flags.{k} = {v!r}"
    if kind == "long-name":
        n = rng.choice([64, 255, 256, 1000, 10_000, 100_000])
        target = rng.choice(["name", "name", "title", "describe", "question", "summary"])
        v = "a" * n
        if target in ("title", "summary"):
            st[target] = v
        elif a is not None:
            a[target] = v
        return kind, f"{target} of {n} characters"
    if kind == "reserved-flag":
        k = rng.choice(["json", "out", "force", "quiet", "threads"])
        v = {"json": "x.json", "out": "elsewhere", "force": True, "quiet": True, "threads": 2}[k]
        if a is not None and isinstance(a.get("flags"), dict) and rng.random() < 0.7:
            a["flags"][k] = v
            where = "an analysis"
        elif isinstance(st.get("defaults"), dict):
            st["defaults"][k] = v
            where = "defaults"
        else:
            where = "nowhere"
        return kind, f"reserved flag {k} in {where}"
    if kind == "duplicate-name":
        if len(ans) >= 2:
            ans[1]["name"] = ans[0]["name"]
        return kind, "two analyses share a name"
    if kind == "remove-required":
        target = rng.choice(["title", "analysis", "name", "verb", "flags"])
        if target in ("title", "analysis"):
            st.pop(target, None)
        elif a is not None:
            a.pop(target, None)
        return kind, f"remove {target}"
    if kind == "weird-verb":
        v = rng.choice(["run", "demo", "windows", "inspect", "", "help", "FORECAST", "forecast ", "--help", "match\n"])
        if a is not None:
            a["verb"] = v
        return kind, f"verb = {v!r}"
    if kind == "truth":
        if a is not None:
            if rng.random() < 0.5:
                a["truth"] = rng.choice([float("nan"), float("inf"), 1e308, -0.0, Raw("1e400")])
                return kind, f"truth = {toml_val(a['truth'])}"
            a["truth_of"] = rng.choice(["bogus", "", "RELATIVE", "average "])
            return kind, f"truth_of = {a['truth_of']!r}"
        return kind, "no analysis"
    if kind == "flag-value":
        if a is None or not isinstance(a.get("flags"), dict):
            return kind, "no analysis"
        verb = a.get("verb") if a.get("verb") in ctx.helps else "match"
        helps = ctx.helps[verb][0]
        cands = sorted(f for f in helps if f not in NEVER_TOUCH and f not in OUTPUT_FLAGS)
        f = rng.choice(cands)
        k = f.replace("-", "_") if rng.random() < 0.5 else f
        mode = rng.choice(["pool", "pool", "bool-false", "bool-true", "array", "number"])
        if mode == "pool":
            v = value_for(rng, ctx, case, f)[0] if helps.get(f) else True
        elif mode == "bool-false":
            v = False
        elif mode == "bool-true":
            v = True
        elif mode == "array":
            v = ["1", "2"]
        else:
            v = rng.choice([0, -1, 10**18, 1.5, float("nan")])
        a["flags"][k] = v
        return kind, f"{a.get('name')}.flags.{k} = {toml_val(v)}"
    if kind == "dash-underscore":
        if a is not None and isinstance(a.get("flags"), dict):
            a["flags"]["log_controls"] = "catalogue_orders"
            a["flags"]["log-controls"] = "weather_index"
        return kind, "both log_controls and log-controls"
    if kind == "many-analyses":
        if ans:
            base_an = ans[-1]
            st["analysis"] = list(st["analysis"]) + [dict(base_an, name=f"copy-{i}") for i in range(3)]
        return kind, "three copies of the last analysis"
    if kind == "defaults-extra":
        k, v = rng.choice([("replace", True), ("method", "ipw"), ("model", "auto"), ("treated", "Fernbury"),
                           ("season", ["7", "7"]), ("draws", 10), ("rope", "nonsense"), ("data", "members.csv")])
        if isinstance(st.get("defaults"), dict):
            st["defaults"][k] = v
        return kind, f"defaults.{k} = {toml_val(v)}"
    # name-chars
    v = rng.choice(["a/b", "..", ".", "con", " ", "-", "--help", "é", "a b", "-rf", "x\u202e"])
    if a is not None:
        a["name"] = v
    return "name-chars", f"name = {v!r}"


def build_case(ctx: Ctx, idx: int) -> Case:
    rng = random.Random(f"aftercast-fuzz:{ctx.seed}:{idx}")
    if idx < len(BASES):
        base = BASES[idx]
    else:
        verb = rng.choice(VERBS)
        base = rng.choice([b for b in BASES if b.verb == verb])
    files = {n: ctx.pristine[n] for n in base.inputs if n != STUDY}
    case = Case(idx, base, base.verb, [list(p) for p in base.flags], list(base.positionals), files)
    if base.verb == "run":
        case.study = base_study()
    if idx < len(BASES):  # the first cases run each base unchanged: a check of the harness itself
        if case.study is not None:
            case.files[STUDY] = emit_toml(case.study)
        return case
    n = 1 + (rng.random() < 0.45) + (rng.random() < 0.2)
    cats = []
    for _ in range(n):
        r = rng.random()
        if base.verb == "run":
            cats.append("study" if r < 0.4 else "file" if r < 0.75 else "flags")
        else:
            cats.append("file" if r < 0.55 else "flags")
    order = {"study": 0, "flags": 1, "file": 2}
    cats.sort(key=lambda c: order[c])
    for c in cats:
        if c == "study":
            name, detail = study_mutation(rng, ctx, case)
            case.muts.append(("study", name, detail))
            continue
        if c == "file" and case.study is not None and STUDY not in case.files:
            case.files[STUDY] = emit_toml(case.study)
        if c == "flags":
            name, detail = flag_mutation(rng, ctx, case)
            case.muts.append(("flags", name, detail))
            continue
        targets = sorted(case.files)
        if not targets:
            name, detail = flag_mutation(rng, ctx, case)
            case.muts.append(("flags", name, detail))
            continue
        tgt = rng.choice(targets)
        names = [m[0] for m in FILE_MUTATORS]
        weights = [m[2] for m in FILE_MUTATORS]
        mi = rng.choices(range(len(FILE_MUTATORS)), weights=weights)[0]
        new, detail = FILE_MUTATORS[mi][1](rng, case.files[tgt])
        case.files[tgt] = new
        case.muts.append(("file", names[mi], f"{tgt}: {detail}"))
    if case.study is not None and STUDY not in case.files:
        case.files[STUDY] = emit_toml(case.study)
    return case


def materialize(case: Case, d: Path):
    d.mkdir(parents=True, exist_ok=True)
    for n, data in case.files.items():
        (d / n).write_bytes(data)
    for n, kind in case.nodes.items():
        p = d / n
        if kind == "devnull":
            os.mknod(p, 0o666 | stat.S_IFCHR, os.makedev(1, 3))
        elif kind == "dir":
            p.mkdir(exist_ok=True)
        elif kind == "nonempty-dir":
            p.mkdir(exist_ok=True)
            (p / "keep.txt").write_text("keep\n")


# ---------------------------------------------------------------------------------------------
# Running and judging.
# ---------------------------------------------------------------------------------------------


def sha(p: Path):
    try:
        st = os.lstat(p)
    except FileNotFoundError:
        return "missing"
    if stat.S_ISCHR(st.st_mode):
        return f"chr:{os.major(st.st_rdev)}:{os.minor(st.st_rdev)}"
    if not stat.S_ISREG(st.st_mode):
        return f"mode:{stat.S_IFMT(st.st_mode):o}"
    h = hashlib.sha256()
    with open(p, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def bin_id(p: Path):
    try:
        s = os.stat(p)
        return (s.st_ino, s.st_size, s.st_mtime_ns)
    except FileNotFoundError:
        return None


def wait_for_bin(p: Path, limit=600.0):
    t0 = time.monotonic()
    while not (p.exists() and os.access(p, os.X_OK)):
        if time.monotonic() - t0 > limit:
            sys.exit(f"fuzz: {p} is missing (waited {limit:.0f} s)")
        time.sleep(2)


def preexec():
    resource.setrlimit(resource.RLIMIT_AS, (MEM_LIMIT, MEM_LIMIT))
    resource.setrlimit(resource.RLIMIT_CORE, (0, 0))
    resource.setrlimit(resource.RLIMIT_FSIZE, (FSIZE_LIMIT, FSIZE_LIMIT))


def devnull_ok() -> bool:
    try:
        st = os.stat("/dev/null")
    except FileNotFoundError:
        return False
    return stat.S_ISCHR(st.st_mode) and os.major(st.st_rdev) == 1 and os.minor(st.st_rdev) == 3


def child_env(case_dir: Path):
    env = {k: v for k, v in os.environ.items() if k not in ("RUST_BACKTRACE", "RUST_LIB_BACKTRACE", "RUST_LOG")}
    env["TMPDIR"] = str(case_dir)
    env["SPARK_SUBMIT"] = str(case_dir / "no-such-spark-submit")
    return env


def execute(ctx: Ctx, case: Case, case_dir: Path, timeout: float):
    """Run a materialized case; returns a result dict. Retries when the binary changes under us."""
    argv = [str(ctx.bin)] + case.args()
    last = "the binary kept changing during the run"
    for attempt in range(5):
        wait_for_bin(ctx.bin)
        before_bin = bin_id(ctx.bin)
        t0 = time.monotonic()
        timed_out = False
        try:
            proc = subprocess.Popen(argv, cwd=case_dir, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                    stderr=subprocess.PIPE, preexec_fn=preexec, start_new_session=True,
                                    env=child_env(case_dir))
        except OSError as e:  # ETXTBSY or ENOENT while the binary is being replaced
            time.sleep(2)
            last = repr(e)
            continue
        try:
            out, err = proc.communicate(timeout=timeout)
        except subprocess.TimeoutExpired:
            timed_out = True
            try:
                os.killpg(proc.pid, signal.SIGKILL)
            except ProcessLookupError:
                pass
            out, err = proc.communicate()
        dur = time.monotonic() - t0
        if bin_id(ctx.bin) != before_bin:
            time.sleep(2)  # rebuilt while running: the result says nothing about either binary
            last = "the binary kept changing during the run"
            continue
        return {"rc": proc.returncode, "stdout": out, "stderr": err, "timed_out": timed_out, "seconds": dur,
                "retries": attempt, "bin_id": before_bin}
    raise RuntimeError(f"could not run {ctx.bin}: {last}")


CTRL_RE = re.compile(r"[\x00-\x08\x0b-\x1f\x7f\u202e]")


def classify(res, timeout) -> dict:
    err_b = res["stderr"]
    err = err_b.decode("utf-8", "replace")
    rc = res["rc"]
    kinds = {}
    if res["timed_out"]:
        kinds["slow"] = f"no exit within {timeout:g} s"
        return kinds
    if rc < 0:
        try:
            name = signal.Signals(-rc).name
        except ValueError:
            name = f"signal {-rc}"
        kinds["crash"] = f"killed by {name}"
    if re.search(r"panicked|stack backtrace|RUST_BACKTRACE", err):
        kinds.setdefault("crash", "Rust panic/backtrace report")
    if "internal error" in err:
        kinds["internal"] = "internal error"
    if rc not in (0, 2):
        kinds["exit-code"] = f"exit {rc}" if rc >= 0 else f"died by signal {-rc}"
    if rc == 2:
        reasons = []
        lines = err.rstrip("\n").split("\n") if err.strip() else []
        if len(err) > 2000:
            reasons.append(f">2000 chars ({len(err)})")
        if len(lines) > 3:
            reasons.append(f">3 lines ({len(lines)})")
        if CTRL_RE.search(err.replace("\r\n", "\n")):
            reasons.append("raw control characters")
        try:
            err_b.decode("utf-8")
        except UnicodeDecodeError:
            reasons.append("non-UTF-8 bytes")
        if not err.strip():
            reasons.append("empty message")
        if reasons:
            kinds["hygiene"] = ", ".join(reasons)
    return kinds


def first_line(err_b: bytes) -> str:
    err = err_b.decode("utf-8", "replace")
    for line in err.split("\n"):
        if line.strip():
            s = line.strip()
            s = CTRL_RE.sub(lambda m: "\\x%02x" % ord(m.group(0)) if ord(m.group(0)) < 256 else "\\u%04x" % ord(m.group(0)), s)
            return s[:300] + ("..." if len(s) > 300 else "")
    return "(empty stderr)"


def normalize(line: str) -> str:
    loc = ""
    m = re.search(r" at (\S+\.rs):(\d+)", line)
    if m:
        loc = f" at {m.group(1)}:{m.group(2)}"
        line = line[: m.start()] + "@LOC" + line[m.end():]
    line = re.sub(r"'[^']*'", "'_'", line)
    line = re.sub(r'"[^"]*"', '"_"', line)
    line = re.sub(r"[\w./~-]*\.(csv|toml|json|jsonl|parquet|gz|html)\b", "FILE", line)
    line = re.sub(r"\d+(\.\d+)?", "N", line)
    line = line.replace("@LOC", loc)
    return line[:160]


def signature(verb, kind, symptom, res, case) -> str:
    if kind == "input-changed":
        outs = [m[2].split(" ")[0] for m in case.muts if m[0] == "flags" and "an input file" in m[2]]
        how = ",".join(sorted(set(outs))) or ("study: " + ",".join(sorted({m[1] for m in case.muts if m[0] == 'study'}))
                                               if case.verb == "run" else "unknown")
        return f"{kind}|{verb}|{how}"
    if kind == "device-replaced":
        outs = [m[2].split(" ")[0] for m in case.muts if "character device" in m[2]]
        return f"{kind}|{verb}|{','.join(sorted(set(outs)))}"
    if kind == "slow":
        return f"{kind}|{verb}|" + ",".join(sorted({f'{m[0]}/{m[1]}' for m in case.muts}))
    fl = normalize(first_line(res["stderr"]))
    if kind == "hygiene":
        sym = re.sub(r" \(\d+\)", "", symptom)
        if fl.startswith("error:") and re.search(r"^Usage:", res["stderr"].decode("utf-8", "replace"), re.M):
            fl = "error: (command-line usage error with a Usage: block)"
        return f"{kind}|{verb}|{sym}|{fl}"
    return f"{kind}|{verb}|{symptom if kind == 'crash' else ''}|{fl}"


# ---------------------------------------------------------------------------------------------
# Saving failures.
# ---------------------------------------------------------------------------------------------


def sh_quote(s: str) -> str:
    b = os.fsencode(s)
    if all(32 <= c < 127 for c in b):
        return shlex.quote(s)
    out = "$'"
    for c in b:
        if c == 0x27:
            out += "\\'"
        elif c == 0x5C:
            out += "\\\\"
        elif 32 <= c < 127:
            out += chr(c)
        else:
            out += "\\x%02x" % c
    return out + "'"


def save_failure(ctx, case, res, kinds, fdir: Path, timeout):
    inputs = fdir / "inputs"
    if fdir.exists():
        shutil.rmtree(fdir)
    materialize(case, inputs)
    args = case.args()
    cmd = " ".join(sh_quote(a) for a in args)
    (fdir / "command.txt").write_text("aftercast " + " ".join(shlex.quote(os.fsencode(a).decode("utf-8", "backslashreplace")) for a in args) + "\n")
    (fdir / "stderr.txt").write_bytes(res["stderr"][:200_000])
    (fdir / "stdout.txt").write_bytes(res["stdout"][:200_000])
    info = {"case": case.idx, "seed": ctx.seed, "base": case.base.name, "verb": case.verb, "kinds": kinds,
            "exit": res["rc"], "timed_out": res["timed_out"], "seconds": round(res["seconds"], 2),
            "mutations": [{"category": c, "mutation": n, "detail": d} for c, n, d in case.muts],
            "argv": [os.fsencode(a).decode("utf-8", "backslashreplace") for a in args]}
    (fdir / "case.json").write_text(json.dumps(info, indent=2) + "\n")
    script = f"""#!/bin/sh
# aftercast fuzz case {case.idx} (seed {ctx.seed}, base {case.base.name})
# findings: {'; '.join(f'{k}: {v}' for k, v in kinds.items())}
# mutations: {case.mutation_text()[:2000].replace(chr(10), ' ')}
# Runs in a fresh copy of inputs/ (named {CASE_DIR_NAME}/, which study '..' paths expect), so the saved
# inputs stay as they were. AFTERCAST=path/to/aftercast overrides the binary.
set -u
here=$(cd "$(dirname "$0")" && pwd)
bin=${{AFTERCAST:-{shlex.quote(str(ctx.bin))}}}
work=$(mktemp -d)/{CASE_DIR_NAME}
mkdir -p "$work"
cp -a "$here/inputs/." "$work/"
cd "$work" || exit 3
ulimit -v {MEM_LIMIT // 1024} 2>/dev/null || true
timeout {int(timeout)} "$bin" {cmd}
rc=$?
echo "exit code $rc (ran in $work)" >&2
exit $rc
"""
    (fdir / "repro.sh").write_text(script)
    os.chmod(fdir / "repro.sh", 0o755)


# ---------------------------------------------------------------------------------------------
# Main loop.
# ---------------------------------------------------------------------------------------------


def head_rows(data: bytes, rows: int | None) -> bytes:
    if rows is None:
        return data
    ls = data.split(b"\n")
    return b"\n".join(ls[: rows + 1]) + b"\n"


def parse_help(bin_path: Path, verb: str):
    wait_for_bin(bin_path)
    out = subprocess.run([str(bin_path), *verb.split(), "--help"], capture_output=True, text=True, timeout=60).stdout
    flags = {}
    for m in re.finditer(r"^\s+(?:-\w, )?--([a-z0-9][a-z0-9-]*)(?: <([A-Z_]+)>)?", out, re.M):
        flags[m.group(1)] = m.group(2) is not None
    usage = re.search(r"Usage: .*", out)
    required = re.findall(r"--([a-z0-9-]+) <", usage.group(0)) if usage else []
    for k in ("help", "version"):
        flags.pop(k, None)
    return flags, required


def safe_rmtree(p: Path, marker_root: Path):
    """Remove p only if it lies inside the harness's work folder or carries the harness marker."""
    p = p.resolve()
    if not p.exists():
        return
    root = marker_root.resolve()
    if p == root or root in p.parents or (p / ".aftercast-fuzz").exists():
        shutil.rmtree(p, ignore_errors=True)
    else:
        sys.exit(f"fuzz: refusing to delete {p}: not made by this harness (no .aftercast-fuzz marker)")


def fmt_table(rows, headers):
    w = [max(len(str(r[i])) for r in rows + [headers]) for i in range(len(headers))]
    line = lambda r: "  ".join(str(c).rjust(w[i]) if i else str(c).ljust(w[i]) for i, c in enumerate(r))
    return "\n".join([line(headers), line(["-" * x for x in w])] + [line(r) for r in rows])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Fuzz the aftercast binary (pre-release check; not part of cargo test).")
    tgt = os.environ.get("CARGO_TARGET_DIR")
    default_bin = Path(tgt) / "debug" / "aftercast" if tgt else REPO / "target" / "debug" / "aftercast"
    ap.add_argument("--bin", type=Path, default=default_bin, help=f"aftercast binary (default {default_bin})")
    ap.add_argument("--minutes", type=float, default=10.0, help="time budget in minutes (default 10)")
    ap.add_argument("--seed", type=int, default=1, help="seed of the case sequence (default 1)")
    ap.add_argument("--work", type=Path, default=None,
                    help="scratch folder (default $TMPDIR/aftercast-fuzz-seed<S>); emptied at the start")
    ap.add_argument("--keep-failures", type=Path, default=None, help="where failing cases go (default <work>/failures)")
    ap.add_argument("--timeout", type=float, default=60.0, help="seconds per run before it counts as slow (default 60)")
    ap.add_argument("--keep-per-signature", type=int, default=3,
                    help="failing cases saved per distinct signature (default 3; all are counted)")
    ap.add_argument("--runs", type=int, default=None, help="stop after this many runs (default: only the time limit)")
    ap.add_argument("--case", type=int, action="append", default=None,
                    help="run only this case number (repeatable): rebuilds it from the seed")
    a = ap.parse_args(argv)

    bin_path = a.bin.resolve() if a.bin.exists() else a.bin
    wait_for_bin(bin_path, limit=120)
    bin_path = bin_path.resolve()
    if not devnull_ok():
        sys.exit("fuzz: /dev/null is not the null character device; fix that before fuzzing")
    work = (a.work or Path(tempfile.gettempdir()) / f"aftercast-fuzz-seed{a.seed}").resolve()
    if work.exists():
        if not (work / ".aftercast-fuzz").exists() and any(work.iterdir()):
            sys.exit(f"fuzz: {work} exists, is not empty and was not made by this harness")
        for sub in ("pristine", CASE_DIR_NAME, "failures"):
            safe_rmtree(work / sub, work)
    work.mkdir(parents=True, exist_ok=True)
    (work / ".aftercast-fuzz").write_text("made by scripts/fuzz.py\n")
    failures = (a.keep_failures or work / "failures").resolve()
    if failures.exists() and failures != work / "failures":
        if any(failures.iterdir()) and not (failures / ".aftercast-fuzz").exists():
            sys.exit(f"fuzz: {failures} is not empty and was not made by this harness")
        safe_rmtree(failures, work)
    failures.mkdir(parents=True, exist_ok=True)
    (failures / ".aftercast-fuzz").write_text("made by scripts/fuzz.py\n")

    pristine_dir = work / "pristine"
    pristine_dir.mkdir()
    pristine = {}
    for name, src, rows in INPUTS:
        data = head_rows((DEMO / src).read_bytes(), rows)
        pristine[name] = data
        (pristine_dir / name).write_bytes(data)
    (pristine_dir / STUDY).write_bytes(emit_toml(base_study()))
    pristine_sha = {p.name: sha(p) for p in sorted(pristine_dir.iterdir())}

    helps = {v: parse_help(bin_path, v) for v in VERBS}
    ctx = Ctx(bin_path, pristine, helps, a.seed)
    bin_sha = sha(bin_path)
    version = subprocess.run([str(bin_path), "--version"], capture_output=True, text=True).stdout.strip()
    print(f"fuzz: {version} at {bin_path} (sha256 {bin_sha[:16]}), seed {a.seed}, {a.minutes:g} min, "
          f"timeout {a.timeout:g} s, work {work}", flush=True)

    case_dir = work / CASE_DIR_NAME
    counts = {v: {k: 0 for k in ALL_KINDS} for v in VERBS}
    runs = {v: 0 for v in VERBS}
    exits = {v: {} for v in VERBS}
    distinct = {}  # signature -> info
    baseline_bad = []
    saved = 0
    log = open(work / "findings.jsonl", "w")
    t_start = time.monotonic()
    deadline = t_start + a.minutes * 60
    next_progress = t_start + PROGRESS_EVERY
    idx = 0
    todo = list(a.case) if a.case else None
    total_runs = 0
    retried = 0
    bins_seen = [bin_id(bin_path)]
    stop_reason = "time limit"
    while True:
        if todo is not None:
            if not todo:
                stop_reason = "requested cases done"
                break
            idx = todo.pop(0)
        elif time.monotonic() >= deadline:
            break
        if a.runs is not None and total_runs >= a.runs:
            stop_reason = "run limit"
            break
        case = build_case(ctx, idx)
        safe_rmtree(case_dir, work)
        materialize(case, case_dir)
        watched = {n: sha(case_dir / n) for n in sorted(case.files)}
        watched.update({n: sha(case_dir / n) for n, k in case.nodes.items() if k == "devnull"})
        res = execute(ctx, case, case_dir, a.timeout)
        retried += res["retries"]
        if res["bin_id"] not in bins_seen:
            bins_seen.append(res["bin_id"])
        kinds = classify(res, a.timeout)
        changed = [n for n, h in watched.items() if case.nodes.get(n) != "devnull" and sha(case_dir / n) != h]
        if changed:
            kinds["input-changed"] = "changed: " + ", ".join(changed)
        dev = [n for n, h in watched.items() if case.nodes.get(n) == "devnull" and sha(case_dir / n) != h]
        if dev:
            kinds["device-replaced"] = "character device replaced by " + sha(case_dir / dev[0]).split(":")[0]
        if not devnull_ok():
            kinds["device-replaced"] = "the system /dev/null is no longer the null device"
        verb = case.verb
        runs[verb] += 1
        total_runs += 1
        ek = "timeout" if res["timed_out"] else str(res["rc"])
        exits[verb][ek] = exits[verb].get(ek, 0) + 1
        if idx < len(BASES) and (res["rc"] != 0 or kinds):
            baseline_bad.append(f"{case.base.name}: exit {res['rc']}: {first_line(res['stderr'])}")
        for k, sym in kinds.items():
            counts[verb][k] += 1
            sig = signature(verb, k, sym, res, case)
            d = distinct.get(sig)
            if d is None:
                d = distinct[sig] = {"kind": k, "verb": verb, "symptom": sym, "first_line": first_line(res["stderr"]),
                                     "mutation": case.mutation_text(), "count": 0, "cases": [], "saved": [],
                                     "command": "aftercast " + " ".join(sh_quote(x) for x in case.args())}
            d["count"] += 1
            d["cases"].append(idx)
        if kinds:
            fdir = None
            sigs = [signature(verb, k, s, res, case) for k, s in kinds.items()]
            if any(len(distinct[s]["saved"]) < a.keep_per_signature for s in sigs):
                saved += 1
                fdir = failures / f"{saved:03d}"
                save_failure(ctx, case, res, kinds, fdir, a.timeout)
                for s in sigs:
                    distinct[s]["saved"].append(str(fdir))
            log.write(json.dumps({"case": idx, "verb": verb, "base": case.base.name, "kinds": kinds, "exit": res["rc"],
                                  "mutations": case.mutation_text(), "first_line": first_line(res["stderr"]),
                                  "saved": str(fdir) if fdir else None,
                                  "argv": [os.fsencode(x).decode("utf-8", "backslashreplace") for x in case.args()]})
                      + "\n")
            log.flush()
        if not devnull_ok():
            if IS_ROOT:
                tmp = "/dev/null.fuzz-restore"
                os.mknod(tmp, 0o666 | stat.S_IFCHR, os.makedev(1, 3))
                os.replace(tmp, "/dev/null")
                print("fuzz: /dev/null was replaced by the run above; restored it", flush=True)
            stop_reason = "/dev/null was replaced"
            break
        now = time.monotonic()
        if now >= next_progress:
            tot = {k: sum(counts[v][k] for v in VERBS) for k in ALL_KINDS}
            print(f"[{(now - t_start) / 60:5.1f} min] runs {total_runs}, findings: "
                  + ", ".join(f"{k} {n}" for k, n in tot.items()), flush=True)
            next_progress = now + PROGRESS_EVERY
        if todo is None:
            idx += 1
    log.close()

    after = {p.name: sha(p) for p in sorted(pristine_dir.iterdir())}
    pristine_changed = [n for n in pristine_sha if after.get(n) != pristine_sha[n]]
    elapsed = time.monotonic() - t_start

    # Summary.
    print()
    print(f"fuzz: {total_runs} runs in {elapsed / 60:.1f} min ({stop_reason}); seed {a.seed}; binary sha256 {bin_sha[:16]}")
    rows = []
    for v in VERBS:
        rows.append([v, runs[v]] + [counts[v][k] for k in ALL_KINDS])
    rows.append(["total", total_runs] + [sum(counts[v][k] for v in VERBS) for k in ALL_KINDS])
    print(fmt_table(rows, ["verb", "runs"] + list(ALL_KINDS)))
    print("\nexit codes per verb: " + "; ".join(
        f"{v} " + ", ".join(f"{k}:{n}" for k, n in sorted(exits[v].items())) for v in VERBS if exits[v]))
    if baseline_bad:
        print("\nWARNING: base commands that do not succeed unmutated (fix the harness or the binary):")
        for b in baseline_bad:
            print("  " + b)
    if pristine_changed:
        print(f"\nWARNING: pristine inputs changed during the run: {pristine_changed}")
    end_sha = sha(bin_path)
    if len(bins_seen) > 1 or end_sha != bin_sha:
        print(f"\nNOTE: the binary was rebuilt during this run ({len(bins_seen)} versions seen; sha256 at the start "
              f"{bin_sha[:16]}, at the end {end_sha[:16]}; {retried} case(s) re-run because it changed mid-case)")
    order = {k: i for i, k in enumerate(ALL_KINDS)}
    dl = sorted(distinct.values(), key=lambda d: (order[d["kind"]], d["verb"], -d["count"]))
    print(f"\ndistinct findings: {len(dl)}")
    for d in dl:
        where = d["saved"][0] if d["saved"] else "(not saved)"
        print(f"- [{d['kind']}] {d['verb']} x{d['count']}: {d['symptom']} | {d['first_line'][:200]}\n"
              f"    mutation: {d['mutation'][:300]}\n    repro: {where}/repro.sh")
    summary = {"seed": a.seed, "minutes": a.minutes, "elapsed_s": round(elapsed, 1), "runs": total_runs,
               "binary": str(bin_path), "binary_sha256": bin_sha, "version": version, "timeout_s": a.timeout,
               "counts": counts, "runs_per_verb": runs, "exit_codes": exits, "baseline_failures": baseline_bad,
               "pristine_changed": pristine_changed, "distinct": dl, "stop_reason": stop_reason,
               "binary_sha256_at_end": end_sha, "binary_versions_seen": len(bins_seen), "cases_rerun": retried}
    (work / "summary.json").write_text(json.dumps(summary, indent=2) + "\n")
    print(f"\nsummary: {work / 'summary.json'}; failing cases: {failures}")
    failing = sum(counts[v][k] for v in VERBS for k in FAILING_KINDS) + len(pristine_changed)
    return 1 if failing else 0


if __name__ == "__main__":
    sys.exit(main())
