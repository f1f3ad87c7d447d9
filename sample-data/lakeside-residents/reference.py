#!/usr/bin/env python3
"""Independent reference tallies for a closeout study (invented data for a made-up
study; not real people or a real organisation).

Reads a study file (TOML) and the responses CSV it names, applies closeout's parsing
rules with Python's csv module, tallies each cell with pandas and computes Wilson and
Clopper-Pearson intervals with statsmodels. Nothing here comes from the Rust code.

    python3 reference.py STUDY.toml [OUT.json]      # default OUT: expected.json beside the study

The rules (the Rust `rows`/`tally` stages implement the same):
  * RFC 4180 CSV; the header is line 1; a record's line is the line it starts on.
  * Rejected, first failing check wins: field count differs from the header's
    ("field_count"); weight blank or not a finite number ("bad_weight"); weight
    negative ("negative_weight"); time non-blank and not RFC 3339 ("bad_time").
    Weight and time are trimmed of surrounding white space before these checks.
    Rejected records never register their id.
  * Otherwise a response. Id = trimmed id (case kept); non-blank and already seen
    among earlier responses -> duplicate, not tallied; else remembered and tallied.
  * Cell = tuple of trimmed, lower-cased `cells.by` values. Answers trimmed and
    lower-cased: blank -> missing; in yes -> yes; in no -> no; else unexpected.
    n = yes + no; weighted sums over yes/no answers only.
"""

from __future__ import annotations

import csv
import json
import math
import platform
import re
import sys
import tomllib
from datetime import datetime
from pathlib import Path

import numpy
import pandas
import scipy
import statsmodels
from statsmodels.stats.proportion import proportion_confint

ALPHA = 0.05  # the studies here ask for 95 % confidence; delta is taken as exactly 0.05

# RFC 3339 section 5.6 date-time: full-date "T" full-time, time-offset Z or +hh:mm.
# The RFC allows a lower-case t and z; we accept them too. A space instead of T
# (the RFC's NOTE) is not accepted. No surrounding text.
RFC3339 = re.compile(
    r"(\d{4})-(\d{2})-(\d{2})[Tt](\d{2}):(\d{2}):(\d{2})(\.\d+)?([Zz]|[+-](\d{2}):(\d{2}))"
)
# A decimal number as Rust's f64 parser and Python's float() both read it (no
# underscores, no hex); "inf"/"nan" spellings are handled separately as non-finite.
DECIMAL = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
NONFINITE = re.compile(r"[+-]?(inf|infinity|nan)", re.IGNORECASE)


def is_rfc3339(text: str) -> bool:
    m = RFC3339.fullmatch(text)
    if not m:
        return False
    year, month, day, hour, minute, second = (int(m.group(i)) for i in range(1, 7))
    try:
        datetime(year, month, day)  # a real calendar date
    except ValueError:
        return False
    if hour > 23 or minute > 59 or second > 60:  # 60: the RFC's leap second
        return False
    if m.group(9) is not None and (int(m.group(9)) > 23 or int(m.group(10)) > 59):
        return False
    return True


def weight_check(text: str) -> str | None:
    """None if the weight is acceptable, else the rejection reason."""
    t = text.strip()
    if t == "" or NONFINITE.fullmatch(t) or not DECIMAL.fullmatch(t):
        return "bad_weight"
    w = float(t)
    if not math.isfinite(w):  # e.g. 1e999 overflows to inf
        return "bad_weight"
    if w < 0:
        return "negative_weight"
    return None


def norm(text: str) -> str:
    return text.strip().lower()


def versions() -> dict:
    return {
        "python": platform.python_version(),
        "pandas": pandas.__version__,
        "numpy": numpy.__version__,
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
    }


def read_records(csv_path: Path):
    """Yield (line, fields) for the header and every record; line = starting line."""
    with open(csv_path, newline="", encoding="utf-8") as f:
        reader = csv.reader(f)  # default 'excel' dialect = RFC 4180 quoting
        last = 0
        for fields in reader:
            yield last + 1, fields
            last = reader.line_num


def compute(study_path: Path) -> dict:
    study = tomllib.loads(study_path.read_text(encoding="utf-8"))
    src = study["source"]
    csv_path = study_path.parent / src["file"]
    by = study["cells"]["by"]
    measures = [
        {
            "name": m["name"],
            "column": m["column"],
            "yes": {norm(v) for v in m["yes"]},
            "no": {norm(v) for v in m["no"]},
        }
        for m in study["measure"]
    ]

    records = read_records(csv_path)
    _, header = next(records)
    col = {name: i for i, name in enumerate(header)}
    width = len(header)
    i_id = col[src["id"]] if "id" in src else None
    i_time = col[src["time"]] if "time" in src else None
    i_w = col[src["weight"]] if "weight" in src else None

    rows_read = 0
    rejections = []
    duplicate_lines = []
    seen: set[str] = set()
    tallied = []  # one dict per tallied response, turned into a DataFrame below

    for line, fields in records:
        rows_read += 1
        reason = None
        if len(fields) != width:
            reason = "field_count"
        if reason is None and i_w is not None:
            reason = weight_check(fields[i_w])
        if reason is None and i_time is not None:
            t = fields[i_time].strip()
            if t != "" and not is_rfc3339(t):
                reason = "bad_time"
        if reason is not None:
            rejections.append({"line": line, "reason": reason})
            continue
        if i_id is not None:
            rid = fields[i_id].strip()
            if rid != "":
                if rid in seen:
                    duplicate_lines.append({"line": line, "id": rid})
                    continue
                seen.add(rid)
        row = {f"cell:{c}": norm(fields[col[c]]) for c in by}
        row["w"] = float(fields[i_w].strip()) if i_w is not None else 1.0
        for m in measures:
            a = norm(fields[col[m["column"]]])
            if a == "":
                cls = "missing"
            elif a in m["yes"]:
                cls = "yes"
            elif a in m["no"]:
                cls = "no"
            else:
                cls = "unexpected"
            row[f"{m['name']}:class"] = cls
            row[f"{m['name']}:value"] = a
        tallied.append(row)

    df = pandas.DataFrame(tallied)
    keys = [f"cell:{c}" for c in by]

    # Per-measure indicator columns, then one pandas groupby sum per cell.
    for m in measures:
        k = m["name"]
        cls = df[f"{k}:class"]
        answered = cls.isin(["yes", "no"])
        y = (cls == "yes").astype("int64")
        df[f"{k}:n"] = answered.astype("int64")
        df[f"{k}:s"] = y
        df[f"{k}:missing"] = (cls == "missing").astype("int64")
        df[f"{k}:unexpected"] = (cls == "unexpected").astype("int64")
        df[f"{k}:sum_w"] = df["w"].where(answered, 0.0)
        df[f"{k}:sum_w2"] = (df["w"] * df["w"]).where(answered, 0.0)
        df[f"{k}:sum_wy"] = (df["w"] * y).where(answered, 0.0)
    df["responses"] = 1
    sum_cols = ["responses"] + [
        f"{m['name']}:{s}"
        for m in measures
        for s in ("n", "s", "missing", "unexpected", "sum_w", "sum_w2", "sum_wy")
    ]
    grouped = df.groupby(keys, sort=True)[sum_cols].sum()

    cells = []
    for key, g in grouped.iterrows():
        key = key if isinstance(key, tuple) else (key,)
        entry = {"cell": dict(zip(by, key)), "responses": int(g["responses"]), "measures": []}
        for m in measures:
            k = m["name"]
            n, s = int(g[f"{k}:n"]), int(g[f"{k}:s"])
            if n > 0:
                wl = [float(x) for x in proportion_confint(s, n, alpha=ALPHA, method="wilson")]
                cp = [float(x) for x in proportion_confint(s, n, alpha=ALPHA, method="beta")]
            else:
                wl = cp = None
            entry["measures"].append(
                {
                    "name": k,
                    "n": n,
                    "successes": s,
                    "missing": int(g[f"{k}:missing"]),
                    "unexpected": int(g[f"{k}:unexpected"]),
                    "sum_w": float(g[f"{k}:sum_w"]),
                    "sum_w2": float(g[f"{k}:sum_w2"]),
                    "sum_wy": float(g[f"{k}:sum_wy"]),
                    "wilson": wl,
                    "clopper_pearson": cp,
                }
            )
        cells.append(entry)

    unexpected = {}
    for m in measures:
        k = m["name"]
        vals = df.loc[df[f"{k}:class"] == "unexpected", f"{k}:value"]
        unexpected[k] = {v: int(c) for v, c in sorted(vals.value_counts().items())}

    planned = [tuple(norm(q["cell"][c]) for c in by) for q in study.get("quota", [])]
    for c in cells:
        c["planned"] = tuple(c["cell"][b] for b in by) in planned

    return {
        "source": (
            "Independent reference (sample-data/lakeside-residents/reference.py) for the "
            f"invented study file {study_path.name}: invented data for a made-up study; not "
            "real people or a real organisation. Records read with Python's csv module "
            "(RFC 4180; a record's line = the line it starts on, header = line 1); rejection "
            "checks in order field_count, bad_weight (weight trimmed, blank or not a finite "
            "decimal number), negative_weight, bad_time (time trimmed, non-blank and not an "
            "RFC 3339 date-time); rejected records never register their id; the first "
            "response with a given trimmed id wins (ids compare case-sensitively; blank ids "
            "never duplicate); cells and answers trimmed and lower-cased. Per-cell counts and "
            "weighted sums by pandas groupby sum over yes/no answers; wilson and "
            "clopper_pearson = statsmodels.stats.proportion.proportion_confint(successes, n, "
            "alpha=0.05, method='wilson' / 'beta') on the unweighted counts (null when n = 0). "
            "cells sorted by the normalised cells.by values; planned = the cell has a [[quota]]."
        ),
        "versions": versions(),
        "study": study_path.name,
        "csv": src["file"],
        "rows_read": rows_read,
        "rows_rejected": len(rejections),
        "rejections": rejections,
        "duplicates": len(duplicate_lines),
        "duplicate_lines": duplicate_lines,
        "responses": int(df.shape[0]),
        "unexpected": unexpected,
        "cells": cells,
    }


def write_json(data: dict, out: Path) -> None:
    out.write_text(json.dumps(data, indent=1, ensure_ascii=True) + "\n", encoding="utf-8")


def main(argv: list[str]) -> int:
    if len(argv) not in (2, 3):
        print(__doc__, file=sys.stderr)
        return 2
    study = Path(argv[1])
    out = Path(argv[2]) if len(argv) == 3 else study.parent / "expected.json"
    write_json(compute(study), out)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
