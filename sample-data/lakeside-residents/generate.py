#!/usr/bin/env python3
"""Write the invented sample study's responses (invented data for a made-up study; not
real people or a real organisation). Quillmere is an invented lakeside town.

    python3 generate.py                          # responses.csv, expected.json, README.md here
    python3 generate.py --rows N --out PATH.csv  # a bigger file of the same shape, plus
                                                 # PATH.expected.json and PATH.study.toml

Everything is deterministic: numpy's PCG64 Generator seeded with (--seed, rows).
The sample file carries its awkward rows at fixed places; the bigger file carries them
at random places (about 0.5 % malformed records and 0.5 % duplicate ids). Weights are
multiples of 1/16, so every weighted sum is exact in binary floating point whatever the
order of summation. The expected tallies are computed afterwards from the written file
by reference.py (an independent reading with csv + pandas + statsmodels) and checked
here against what the generator meant to write.
"""

from __future__ import annotations

import argparse
import sys
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.dont_write_bytecode = True
sys.path.insert(0, str(HERE))
import reference  # noqa: E402

SEED = 20260511
HEADER = [
    "respondent_id",
    "submitted_at",
    "district",
    "age_band",
    "weight",
    "q_satisfaction",
    "q_recommend",
    "interviewer_note",
]
ID, TIME, DISTRICT, AGE, WEIGHT, SAT, REC, NOTE = range(8)

CELLS = [
    ("north", "18-44"),
    ("north", "45+"),
    ("harbour", "18-44"),
    ("harbour", "45+"),
    ("hillside", "18-44"),
    ("hillside", "45+"),
]
# Share of each day's arrivals by cell; hillside/18-44 lags, and lags more from day 4.
SHARES = np.array([0.19, 0.20, 0.18, 0.22, 0.07, 0.14])
LAG_CELL, LAG_FACTOR_LATE = 4, 0.4
# Population share of each cell (for the design weights) and true proportions.
POP_SHARE = np.array([0.19, 0.23, 0.13, 0.17, 0.09, 0.19])
P_SATISFIED = np.array([0.55, 0.68, 0.42, 0.61, 0.35, 0.74])
P_RECOMMEND_IF_SAT, P_RECOMMEND_IF_NOT = 0.82, 0.24
START = datetime(2026, 5, 11, tzinfo=timezone.utc)  # Monday; five days of fieldwork
DAY_VOLUME = np.array([0.17, 0.22, 0.21, 0.20, 0.20])
PLAIN_NOTES = ["second visit", "web form", "by phone", "large print card used", "doorstep"]


def fmt_time(t: datetime) -> str:
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def fmt_weight(sixteenths: int) -> str:
    return f"{sixteenths / 16:.4f}".rstrip("0").rstrip(".")


class Row:
    """One record as raw text fields; quote = indices written inside quotes."""

    def __init__(self, fields: list[str]):
        self.fields = fields
        self.quote: set[int] = set()
        self.what: list[str] = []  # what is awkward about it, for the README
        self.outcome = "tallied"  # tallied | rejected:<reason> | duplicate

    def text(self) -> str:
        out = []
        for i, f in enumerate(self.fields):
            if i in self.quote or any(c in f for c in ',"\n\r'):
                out.append('"' + f.replace('"', '""') + '"')
            else:
                out.append(f)
        return ",".join(out) + "\n"


def base_rows(rng: np.random.Generator, n: int) -> list[Row]:
    day = rng.choice(5, size=n, p=DAY_VOLUME)
    peak = rng.random(n) < 0.45
    hours = np.where(peak, rng.normal(11.5, 1.3, n), rng.normal(18.25, 1.4, n))
    hours = np.clip(hours, 8.0, 21.75)
    secs = np.sort(day * 86400 + np.round(hours * 3600).astype(np.int64))
    day = secs // 86400
    share_late = SHARES.copy()
    share_late[LAG_CELL] *= LAG_FACTOR_LATE
    share_late /= share_late.sum()
    cell = np.where(
        day < 3,
        rng.choice(6, size=n, p=SHARES / SHARES.sum()),
        rng.choice(6, size=n, p=share_late),
    )
    base_w = POP_SHARE / SHARES
    base_w = base_w / base_w.mean()
    w16 = np.clip(np.round(16 * base_w[cell] * rng.lognormal(0.0, 0.15, n)), 4, 64).astype(int)
    sat = rng.random(n) < P_SATISFIED[cell]
    sat_code = np.where(
        sat, rng.choice([4, 5], size=n, p=[0.6, 0.4]), rng.choice([1, 2, 3], size=n, p=[0.2, 0.35, 0.45])
    )
    rec = rng.random(n) < np.where(sat, P_RECOMMEND_IF_SAT, P_RECOMMEND_IF_NOT)
    has_note = rng.random(n) < 0.04
    note_pick = rng.integers(0, len(PLAIN_NOTES), n)
    width = max(5, len(str(n)))
    rows = []
    for i in range(n):
        d, a = CELLS[cell[i]]
        rows.append(
            Row(
                [
                    f"R{i + 1:0{width}d}",
                    fmt_time(START + timedelta(seconds=int(secs[i]))),
                    d,
                    a,
                    fmt_weight(int(w16[i])),
                    str(int(sat_code[i])),
                    "yes" if rec[i] else "no",
                    PLAIN_NOTES[note_pick[i]] if has_note[i] else "",
                ]
            )
        )
    return rows


# ---- kinds of awkwardness: each takes (row, rows, rng-ish arg) and edits the row ----

def case_variant(value: str, k: int) -> str:
    return [f" {value.title()} ", value.upper(), f"{value.title()} ", f" {value}"][k % 4]


def reject(row: Row, reason: str, what: str) -> None:
    row.outcome = f"rejected:{reason}"
    row.what.append(what)


def too_few(row: Row) -> None:
    row.fields = row.fields[:NOTE]  # the note column is missing: 7 fields
    reject(row, "field_count", "one field too few (no interviewer_note column)")


def too_many_unquoted_comma(row: Row) -> None:
    row.fields = row.fields[:NOTE] + ["left card at door", " no answer"]
    reject(row, "field_count", "one field too many (a note with an unquoted comma)")


def too_many_trailing(row: Row) -> None:
    row.fields = row.fields + [""]
    reject(row, "field_count", "one field too many (a trailing comma)")


def sample_rows() -> list[Row]:
    rng = np.random.default_rng([SEED, 900])
    rows = base_rows(rng, 900)
    used: set[int] = set()

    def at(i: int) -> Row:
        assert i not in used, f"row {i} used twice"
        used.add(i)
        return rows[i]

    def set_field(i: int, f: int, value: str, what: str) -> None:
        r = at(i)
        r.fields[f] = value
        r.what.append(what)

    # Answers: missing, unexpected, and case / space variants that still match.
    set_field(12, SAT, "", "q_satisfaction blank (missing)")
    set_field(47, REC, "", "q_recommend blank (missing)")
    r = at(88)
    r.fields[SAT] = r.fields[REC] = ""
    r.what.append("both answers blank (missing, missing)")
    set_field(150, SAT, "   ", "q_satisfaction only spaces (missing)")
    set_field(203, SAT, "dont_know", "q_satisfaction 'dont_know' (unexpected)")
    set_field(260, SAT, "refused", "q_satisfaction 'refused' (unexpected)")
    set_field(301, SAT, "9", "q_satisfaction '9' (unexpected)")
    set_field(355, SAT, " Dont_Know ", "q_satisfaction ' Dont_Know ' (unexpected 'dont_know')")
    set_field(402, SAT, "9", "q_satisfaction '9' (unexpected)")
    set_field(460, REC, "dont_know", "q_recommend 'dont_know' (unexpected)")
    set_field(515, REC, "Refused", "q_recommend 'Refused' (unexpected 'refused')")
    set_field(570, REC, "9", "q_recommend '9' (unexpected)")
    set_field(611, REC, "DONT_KNOW", "q_recommend 'DONT_KNOW' (unexpected 'dont_know')")
    set_field(30, SAT, " 5 ", "q_satisfaction ' 5 ' (yes)")
    set_field(95, REC, "YES", "q_recommend 'YES' (yes)")
    set_field(140, REC, " No ", "q_recommend ' No ' (no)")
    set_field(222, REC, "Yes ", "q_recommend 'Yes ' (yes)")
    set_field(333, SAT, "4 ", "q_satisfaction '4 ' (yes)")
    # Cell values in other cases / with spaces: the same planned cell.
    for k, i in enumerate([61, 177, 244, 509]):
        r = at(i)
        v = case_variant(r.fields[DISTRICT], k)
        r.fields[DISTRICT] = v
        r.what.append(f"district {v!r} (matches {v.strip().lower()!r})")
    for k, i in enumerate([288, 633]):
        r = at(i)
        v = [f" {r.fields[AGE]}", f"{r.fields[AGE]} "][k]
        r.fields[AGE] = v
        r.what.append(f"age_band {v!r} (matches {v.strip()!r})")
    # Notes: quoted, with a comma, an embedded newline, an ANSI escape, a tab, quotes.
    for i, note, what in [
        (120, "rang twice, answered second time", "quoted note with a comma"),
        (280, "spoke to carer\nwill ring again Friday", "quoted note with an embedded newline (record spans two lines)"),
        (430, "\x1b[31mURGENT\x1b[0m call back", "quoted note with an ANSI escape (ESC [31m ... ESC [0m)"),
        (590, "left card\tat door", "quoted note with a tab"),
        (650, 'said "fine" and shut the door', "quoted note with doubled quotes"),
    ]:
        r = at(i)
        r.fields[NOTE] = note
        r.quote.add(NOTE)
        r.what.append(what)
    # Cells not in the quotas.
    for i, d in [(170, "airfield"), (390, "airfield"), (540, " Airfield "), (700, "airfield"), (800, "=1+1")]:
        set_field(i, DISTRICT, d, f"unplanned district {d!r}")
    # Ids: blank ones are valid and never duplicates.
    set_field(210, ID, "", "blank respondent_id (tallied; never a duplicate)")
    set_field(640, ID, "", "blank respondent_id (tallied; never a duplicate)")
    set_field(720, ID, "   ", "respondent_id only spaces (blank; tallied)")
    # Weights and times that are valid though odd.
    set_field(77, WEIGHT, "0", "weight 0 (valid)")
    set_field(488, WEIGHT, "0", "weight 0 (valid)")
    set_field(377, WEIGHT, " 1.25 ", "weight ' 1.25 ' with spaces (valid: trimmed)")
    set_field(99, TIME, "", "blank submitted_at (valid: no time)")
    set_field(555, TIME, "", "blank submitted_at (valid: no time)")

    # Rejections, in check order field_count, bad_weight, negative_weight, bad_time.
    too_few(at(70))
    too_many_unquoted_comma(at(310))
    r = at(500)
    r.fields[WEIGHT] = "abc"
    too_few(r)
    r.what[-1] += " and weight 'abc' (field_count wins)"
    too_many_trailing(at(680))
    for i, w, reason in [(135, "abc", "bad_weight"), (190, "", "bad_weight"), (420, "NaN", "bad_weight"),
                         (230, "-1.5", "negative_weight"), (625, "-0.25", "negative_weight")]:
        r = at(i)
        r.fields[WEIGHT] = w
        reject(r, reason, f"weight {w!r}")
    for i, t in [(340, "yesterday"), (745, "2026-05-14T10:20:00")]:
        r = at(i)
        r.fields[TIME] = t
        reject(r, "bad_time", f"submitted_at {t!r}" + (" (no offset)" if t[0].isdigit() else ""))
    r = at(470)
    r.fields[WEIGHT], r.fields[TIME] = "abc", "yesterday"
    reject(r, "bad_weight", "weight 'abc' and submitted_at 'yesterday' (bad_weight wins)")
    r = at(820)
    r.fields[WEIGHT], r.fields[TIME] = "-1.5", "yesterday"
    reject(r, "negative_weight", "weight '-1.5' and submitted_at 'yesterday' (negative_weight wins)")

    # Duplicate ids: the first response wins; rejected records never register theirs.
    def dup(i: int, j: int, what: str, spaces: bool = False) -> None:
        r = at(i)
        r.fields[ID] = f" {rows[j].fields[ID].strip()} " if spaces else rows[j].fields[ID].strip()
        r.outcome = "duplicate"
        r.what.append(what)

    src = rows[400]
    r = at(412)
    r.fields = [src.fields[ID], r.fields[TIME]] + src.fields[DISTRICT:]
    r.outcome = "duplicate"
    r.what.append(f"duplicate id {src.fields[ID]} (a resubmission: same cell, weight and answers)")
    dup(530, 14, f"duplicate id {rows[14].fields[ID]} (different cell and answers)")
    dup(660, 14, f"duplicate id {rows[14].fields[ID]} again (third record with it)")
    dup(777, 250, f"duplicate id ' {rows[250].fields[ID]} ' (spaces; trimmed)", spaces=True)
    rejected_id = rows[135].fields[ID]
    set_field(600, ID, rejected_id, f"id {rejected_id} of the rejected record above (tallied: rejected records never register their id)")
    dup(880, 600, f"duplicate id {rejected_id} (its first response is the record above)")
    low = rows[320].fields[ID].lower()
    set_field(730, ID, low, f"id {low!r}: differs only in case from {rows[320].fields[ID]} (a different id; tallied)")
    r = at(850)
    r.fields[ID] = rows[5].fields[ID]
    r.fields[WEIGHT] = "abc"
    reject(r, "bad_weight", f"id {rows[5].fields[ID]} already seen, but weight 'abc' (rejected, not a duplicate)")
    return rows


def random_rows(n: int, seed: int) -> list[Row]:
    rng = np.random.default_rng([seed, n])
    rows = base_rows(rng, n)
    rng = np.random.default_rng([seed, n, 1])  # the awkwardness stream
    registered: list[str] = []  # ids of tallied responses so far
    seen: set[str] = set()
    rejected_ids: list[str] = []
    weights = {"bad_weight": ["abc", "", "NaN", "1,5", "n/a"], "negative_weight": ["-1.5", "-0.25", "-2"]}
    notes = ["rang twice, answered second time", "spoke to carer\nwill ring again",
             "\x1b[31mURGENT\x1b[0m call back", "left card\tat door", 'said "fine"']
    for i, r in enumerate(rows):
        u = rng.random()
        if u < 0.005:  # malformed
            kind = rng.integers(0, 7)
            if kind == 0:
                too_few(r)
            elif kind == 1:
                too_many_unquoted_comma(r)
            elif kind == 2:
                too_many_trailing(r)
            elif kind in (3, 4):
                reason = "bad_weight" if kind == 3 else "negative_weight"
                w = weights[reason][rng.integers(0, len(weights[reason]))]
                r.fields[WEIGHT] = w
                reject(r, reason, f"weight {w!r}")
            else:
                t = ["yesterday", r.fields[TIME][:-1], "2026-05-32T10:00:00Z"][rng.integers(0, 3)]
                r.fields[TIME] = t
                reject(r, "bad_time", f"submitted_at {t!r}")
            if r.fields[ID].strip():
                rejected_ids.append(r.fields[ID].strip())
            continue
        if u < 0.010 and registered:  # duplicate id of an earlier tallied response
            j = rng.integers(0, len(registered))
            r.fields[ID] = registered[j] if rng.random() < 0.8 else f" {registered[j]} "
            r.outcome = "duplicate"
            r.what.append("duplicate id")
        elif u < 0.0105 and rejected_ids:  # reuse the id of a rejected record: tallied
            r.fields[ID] = rejected_ids.pop(0)
            r.what.append("id of an earlier rejected record")
        elif u < 0.0115:
            r.fields[ID] = ["", "  "][rng.integers(0, 2)]
            r.what.append("blank id")
        elif u < 0.0120 and registered:
            low = registered[rng.integers(0, len(registered))].lower()
            if low not in seen:
                r.fields[ID] = low
                r.what.append("id differing only in case")
        # Independent, valid awkwardness.
        v = rng.random(12)
        if v[0] < 0.01:
            r.fields[SAT] = ["", "   "][rng.integers(0, 2)]
        if v[1] < 0.01:
            r.fields[REC] = ""
        if v[2] < 0.004:
            r.fields[SAT] = ["dont_know", "refused", "9", " Dont_Know "][rng.integers(0, 4)]
        if v[3] < 0.004:
            r.fields[REC] = ["dont_know", "Refused", "9", "maybe"][rng.integers(0, 4)]
        if v[4] < 0.01:
            r.fields[SAT] = f" {r.fields[SAT]} "
        if v[5] < 0.01:
            r.fields[REC] = case_variant(r.fields[REC], int(rng.integers(0, 4)))
        if v[6] < 0.01:
            r.fields[DISTRICT] = case_variant(r.fields[DISTRICT], int(rng.integers(0, 4)))
        if v[7] < 0.005:
            r.fields[AGE] = f" {r.fields[AGE]} "
        if v[8] < 0.003:
            r.fields[NOTE] = notes[rng.integers(0, len(notes))]
            r.quote.add(NOTE)
        if v[9] < 0.002:
            r.fields[DISTRICT] = ["airfield", " Airfield ", "=1+1"][rng.integers(0, 3)]
        if v[10] < 0.001:
            r.fields[WEIGHT] = "0"
        if v[11] < 0.001:
            r.fields[TIME] = ""
        if r.outcome == "tallied" and r.fields[ID].strip():
            assert r.fields[ID].strip() not in seen
            registered.append(r.fields[ID].strip())
            seen.add(r.fields[ID].strip())
    return rows


def write_csv(rows: list[Row], path: Path) -> list[int]:
    """Write the file; return each record's starting line."""
    lines, line = [], 2
    with open(path, "w", encoding="utf-8", newline="") as f:
        f.write(",".join(HEADER) + "\n")
        for r in rows:
            text = r.text()
            f.write(text)
            lines.append(line)
            line += text.count("\n")
    return lines


def check(rows: list[Row], lines: list[int], expected: dict) -> None:
    """The reference's reading must agree with what the generator meant to write."""
    meant_rej = [{"line": l, "reason": r.outcome.split(":")[1]} for r, l in zip(rows, lines)
                 if r.outcome.startswith("rejected")]
    meant_dup = [{"line": l, "id": r.fields[ID].strip()} for r, l in zip(rows, lines) if r.outcome == "duplicate"]
    assert expected["rows_read"] == len(rows), (expected["rows_read"], len(rows))
    assert expected["rejections"] == meant_rej, "rejections differ from the generator's intent"
    assert expected["duplicate_lines"] == meant_dup, "duplicates differ from the generator's intent"
    assert expected["responses"] == len(rows) - len(meant_rej) - len(meant_dup)
    assert sum(c["responses"] for c in expected["cells"]) == expected["responses"]
    # Per-cell counts straight from the in-memory rows, without the file or pandas.
    yes = {"satisfied": {"4", "5"}, "would_recommend": {"yes"}}
    no = {"satisfied": {"1", "2", "3"}, "would_recommend": {"no"}}
    col = {"satisfied": SAT, "would_recommend": REC}
    mine: dict = {}
    for r in rows:
        if r.outcome != "tallied":
            continue
        key = (r.fields[DISTRICT].strip().lower(), r.fields[AGE].strip().lower())
        c = mine.setdefault(key, {"responses": 0, **{m: [0, 0, 0.0] for m in col}})
        c["responses"] += 1
        for m, f in col.items():
            a = r.fields[f].strip().lower()
            if a in yes[m] or a in no[m]:
                c[m][0] += 1
                c[m][1] += a in yes[m]
                c[m][2] += float(r.fields[WEIGHT])
    theirs = {
        (c["cell"]["district"], c["cell"]["age_band"]): {
            "responses": c["responses"],
            **{m["name"]: [m["n"], m["successes"], m["sum_w"]] for m in c["measures"]},
        }
        for c in expected["cells"]
    }
    assert mine == theirs, "per-cell tallies differ from the generator's own count"


def study_text(csv_name: str, n: int, seed: int) -> str:
    v = reference.versions()
    expect = [n * s / SHARES.sum() for s in SHARES]  # responses a cell gets, roughly
    pops = [int(np.ceil(4 * e / 1000) * 1000) for e in expect]
    q = []
    for k, (d, a) in enumerate(CELLS):
        q.append(f'[[quota]]\ncell = {{ district = "{d}", age_band = "{a}" }}\n')
        if k % 2 == 0:
            q[-1] += f"minimum = {int(round(expect[k] / 10))}\n"
        if k != 5:
            q[-1] += f"population = {pops[k]}\n"
    return (
        "# Invented data for a made-up study; not real people or a real organisation.\n"
        f"# Written by sample-data/lakeside-residents/generate.py --rows {n} --seed {seed}\n"
        f"# (python {v['python']}, numpy {v['numpy']}); expected tallies in the .expected.json\n"
        f"# beside it (pandas {v['pandas']}, statsmodels {v['statsmodels']}, scipy {v['scipy']}).\n"
        f'title = "Quillmere residents\' survey, generated {n}-row exactness file (invented)"\n\n'
        "[source]\n"
        f'file = "{csv_name}"\nid = "respondent_id"\ntime = "submitted_at"\nweight = "weight"\n\n'
        "[target]\nmargin = 0.10\nconfidence = 0.95\ndecide_by = \"wilson\"\nsimultaneous = false\n"
        'deadline = "2026-05-18T17:00:00Z"\n\n'
        '[cells]\nby = ["district", "age_band"]\n\n'
        '[[measure]]\nname = "satisfied"\ncolumn = "q_satisfaction"\nyes = ["4", "5"]\nno = ["1", "2", "3"]\n\n'
        '[[measure]]\nname = "would_recommend"\ncolumn = "q_recommend"\nyes = ["yes"]\nno = ["no"]\n\n'
        + "\n".join(q)
    )


def readme(rows: list[Row], lines: list[int], expected: dict) -> str:
    v = expected["versions"]
    out = [
        "# Quillmere residents' survey — an invented sample study",
        "",
        "**Invented data for a made-up study; not real people or a real organisation.**",
        "Quillmere is an invented lakeside town with three districts (north, harbour,",
        "hillside). Its council's invented residents' survey asks two key questions —",
        "satisfaction with local services on a 1–5 scale (4 or 5 counts as satisfied) and",
        "whether the resident would recommend the town (yes / no) — in six quota cells,",
        "district × age band (18-44, 45+), over five days of fieldwork (11–15 May 2026).",
        "",
        "| file | what |",
        "| --- | --- |",
        "| `study.toml` | the study: measures, cells, target (±10 points at 95 %, Wilson), quotas |",
        "| `responses.csv` | 900 records, written by `generate.py` (seeded; do not edit by hand) |",
        "| `generate.py` | writes `responses.csv`, `expected.json` and this README; `--rows N --out PATH` writes a bigger file |",
        "| `reference.py` | the independent reading: Python csv + pandas groupby + statsmodels intervals |",
        "| `expected.json` | what a correct reading of `responses.csv` gives |",
        "",
        "Regenerate (byte-identical with the versions below):",
        "",
        "```sh",
        "pip install pandas statsmodels   # numpy and scipy come with them",
        "python3 sample-data/lakeside-residents/generate.py",
        "python3 sample-data/lakeside-residents/generate.py --rows 50000 --out tests/data/generated-50k.csv",
        "```",
        "",
        f"Versions: python {v['python']}, numpy {v['numpy']}, pandas {v['pandas']}, "
        f"statsmodels {v['statsmodels']}, scipy {v['scipy']}.",
        "",
        "The fieldwork has a daily rhythm (a late-morning and an early-evening peak); the",
        "cells fill at different rates and hillside/18-44 clearly lags (and slows further",
        "from day 4). Weights are multiples of 1/16, so weighted sums are exact in binary",
        "floating point and can be compared for equality.",
        "",
        "## Totals",
        "",
        f"- records read: {expected['rows_read']}; rejected: {expected['rows_rejected']}; "
        f"duplicates: {expected['duplicates']}; tallied responses: {expected['responses']}",
        "- unexpected answers: "
        + "; ".join(f"{m}: " + ", ".join(f"{k!r} ×{c}" for k, c in d.items()) for m, d in expected["unexpected"].items()),
        "",
        "| cell | planned | responses | satisfied yes/n | would_recommend yes/n |",
        "| --- | --- | --- | --- | --- |",
    ]
    for c in expected["cells"]:
        m = {x["name"]: x for x in c["measures"]}
        cell = f"{c['cell']['district']} / {c['cell']['age_band']}"
        out.append(
            f"| `{cell}` | {'yes' if c['planned'] else 'no'} | {c['responses']} | "
            f"{m['satisfied']['successes']}/{m['satisfied']['n']} | "
            f"{m['would_recommend']['successes']}/{m['would_recommend']['n']} |"
        )
    out += [
        "",
        "## The awkward records and their lines",
        "",
        "The header is line 1; a record's line is the line it starts on (the record with",
        "the embedded newline spans two lines, so the next record's line jumps by 2).",
        "Outcome: tallied, rejected (with the reason), or duplicate (not tallied).",
        "",
        "| line | id | what | outcome |",
        "| --- | --- | --- | --- |",
    ]
    for r, l in zip(rows, lines):
        if r.what:
            rid = r.fields[ID] if r.fields[ID].strip() else "(blank)"
            out.append(f"| {l} | `{rid}` | {'; '.join(r.what)} | {r.outcome.replace(':', ': ')} |")
    out += [
        "",
        "Rules followed (the Rust code implements the same): checks in the order",
        "field_count, bad_weight, negative_weight, bad_time, first failing wins; weight and",
        "time are trimmed before the checks; rejected records never register their id; ids",
        "are trimmed and compared case-sensitively; the first response with an id wins; blank",
        "ids never duplicate; cells and answers are trimmed and lower-cased.",
        "",
    ]
    return "\n".join(out)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--rows", type=int, help="write a bigger random file of this many records")
    ap.add_argument("--out", type=Path, help="the bigger file's path (…/NAME.csv)")
    ap.add_argument("--seed", type=int, default=SEED)
    args = ap.parse_args()
    if args.rows is None:
        rows = sample_rows()
        lines = write_csv(rows, HERE / "responses.csv")
        expected = reference.compute(HERE / "study.toml")
        check(rows, lines, expected)
        reference.write_json(expected, HERE / "expected.json")
        (HERE / "README.md").write_text(readme(rows, lines, expected), encoding="utf-8")
        print(f"wrote {HERE / 'responses.csv'}: {len(rows)} records, {lines[-1]} lines")
        return 0
    if args.out is None or args.out.suffix != ".csv":
        ap.error("--rows needs --out PATH.csv")
    rows = random_rows(args.rows, args.seed)
    out = args.out
    stem = out.with_suffix("")
    study = Path(f"{stem}.study.toml")
    lines = write_csv(rows, out)
    study.write_text(study_text(out.name, args.rows, args.seed), encoding="utf-8")
    expected = reference.compute(study)
    check(rows, lines, expected)
    reference.write_json(expected, Path(f"{stem}.expected.json"))
    print(f"wrote {out}: {len(rows)} records, {out.stat().st_size} bytes; {study}; {stem}.expected.json")
    return 0


if __name__ == "__main__":
    sys.exit(main())
