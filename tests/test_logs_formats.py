"""Logs that bend the exposure record in ordinary ways are read, not rejected.

Every log here is invented and written in tmp_path. The outside check is a
plain-Python count of the same records (`python_counts`, and `python_days`
for the day of each unit's first exposure, with times computed by Python's
`datetime`), never a figure taken from our own output.
"""

import csv
import gzip
import io
import json
from collections import Counter
from datetime import date, datetime, timedelta
from pathlib import Path

import mmh3
import pytest

from audit import LogError, audit_logs
from tests.invented_logs import FIELDS, counts_of, invented_records, python_counts

SPLIT = {"left": 50, "right": 50}


def audit(paths, **options):
    return audit_logs([str(p) for p in paths], expect=SPLIT, replay_units=0, **options)


def exp_a(records):
    return {k: v for k, v in python_counts(records).items() if k[0] == "exp-a"}


def instant(record) -> datetime:
    return datetime.fromisoformat(record["ts"].replace("Z", "+00:00"))


def python_days(records) -> Counter:
    """Units counted in exp-a by the UTC day of their first exposure (one arm only, not forced)."""
    rows = [r for r in records if r["experiment"] == "exp-a"]
    arms, forced, first = {}, set(), {}
    for r in rows:
        arms.setdefault(r["unit"], set()).add(r["arm"])
        if r["forced"]:
            forced.add(r["unit"])
        first[r["unit"]] = min(first.get(r["unit"], instant(r)), instant(r))
    return Counter(first[u].date() for u, a in arms.items() if len(a) == 1 and u not in forced)


def audited_days(result) -> Counter:
    result, = [r for r in result.results if r.experiment == "exp-a"]
    return Counter({d.day: sum(d.arm_units) for d in result.days if sum(d.arm_units)})


def write_text(path: Path, text: str, gz: bool = False) -> Path:
    data = text.encode("utf-8")
    path.write_bytes(gzip.compress(data) if gz else data)
    return path


def jsonl_text(rows, newline="\n", bom=False, blank_every=0) -> str:
    lines = []
    for n, row in enumerate(rows):
        lines.append(json.dumps(row))
        if blank_every and n % blank_every == 0:
            lines.append("")
    return ("\ufeff" if bom else "") + newline.join(lines) + newline


def csv_text(rows, fields=FIELDS, delimiter=",", newline="\n", bom=False, quote_all=False) -> str:
    out = io.StringIO()
    writer = csv.writer(out, delimiter=delimiter, lineterminator=newline,
                        quoting=csv.QUOTE_ALL if quote_all else csv.QUOTE_MINIMAL)
    writer.writerow(fields)
    for row in rows:
        writer.writerow(["" if row.get(f) is None else row.get(f) for f in fields])
    return ("\ufeff" if bom else "") + out.getvalue()


def respelled(records, field, spell):
    return [dict(r, **{field: spell(r)}) for r in records]


# -- forced ------------------------------------------------------------------------------------------

FLAG_SPELLINGS = {  # (spelling of true, spelling of false): common practice, no source
    "words": ("true", "false"), "digits as text": ("1", "0"), "numbers": (1, 0), "yes/no": ("yes", "no"),
    "capitals": ("TRUE", "False"), "one letter": ("t", "f"),
}


@pytest.mark.parametrize("name", sorted(FLAG_SPELLINGS))
@pytest.mark.parametrize("fmt", ["jsonl", "csv"])
def test_forced_spelled_as_text_or_numbers(tmp_path, name, fmt):
    records = invented_records(seed=31)
    yes, no = FLAG_SPELLINGS[name]
    rows = respelled(records, "forced", lambda r: yes if r["forced"] else no)
    text = jsonl_text(rows) if fmt == "jsonl" else csv_text(rows)
    result = audit([write_text(tmp_path / f"log.{fmt}", text)])
    assert result.malformed.total == 0
    assert counts_of(result) == exp_a(records)
    assert next(r for r in result.results if r.experiment == "exp-a").forced_units == \
        len({r["unit"] for r in records if r["forced"] and r["experiment"] == "exp-a"})


@pytest.mark.parametrize("empty", ["", None])
def test_forced_empty_or_null_is_false(tmp_path, empty):
    records = [dict(r, forced=False) for r in invented_records(seed=32)]
    rows = respelled(records, "forced", lambda r: empty)
    for fmt, text in (("jsonl", jsonl_text(rows)), ("csv", csv_text(rows))):
        result = audit([write_text(tmp_path / f"log.{fmt}", text)])
        assert result.malformed.total == 0 and counts_of(result) == exp_a(records)


# -- ts ----------------------------------------------------------------------------------------------

def _offset(r):  # RFC 3339 section 5.6: time-numoffset; the same instant one hour east of UTC
    return (instant(r) + timedelta(hours=1)).strftime("%Y-%m-%dT%H:%M:%S+01:00")


TIME_SPELLINGS = {  # each names the standard its spelling follows
    "space, no zone": lambda r: instant(r).strftime("%Y-%m-%d %H:%M:%S"),  # ISO 8601 / RFC 3339 5.6 NOTE (space)
    "offset": _offset,
    "microseconds": lambda r: instant(r).strftime("%Y-%m-%dT%H:%M:%S.%fZ"),  # RFC 3339 time-secfrac
    "lower-case t and z": lambda r: instant(r).strftime("%Y-%m-%dt%H:%M:%Sz"),  # RFC 3339 5.6 NOTE
    "epoch seconds": lambda r: int(instant(r).timestamp()),  # POSIX time, seconds since 1970-01-01 UTC
    "epoch seconds as text": lambda r: str(int(instant(r).timestamp())),
    "epoch milliseconds": lambda r: int(instant(r).timestamp() * 1000),
    "epoch microseconds as text": lambda r: str(int(instant(r).timestamp() * 1_000_000)),
}


@pytest.mark.parametrize("name", sorted(TIME_SPELLINGS))
@pytest.mark.parametrize("fmt", ["jsonl", "csv"])
def test_times_in_other_spellings_are_the_same_instants(tmp_path, name, fmt):
    records = invented_records(seed=33)
    rows = respelled(records, "ts", TIME_SPELLINGS[name])
    text = jsonl_text(rows) if fmt == "jsonl" else csv_text(rows)
    result = audit([write_text(tmp_path / f"log.{fmt}", text)])
    assert result.malformed.total == 0
    assert counts_of(result) == exp_a(records)
    assert audited_days(result) == python_days(records)


def test_an_offset_moves_the_day_to_the_utc_one(tmp_path):
    # 2026-11-04T00:30:00+01:00 is 2026-11-03T23:30:00Z (RFC 3339 section 4.2: local time minus the offset)
    rows = [{"ts": "2026-11-04T00:30:00+01:00", "unit": f"U-{n}", "experiment": "exp-a", "arm": "left" if n % 2 else "right"}
            for n in range(10)]
    result = audit([write_text(tmp_path / "log.jsonl", jsonl_text(rows))])
    assert audited_days(result) == Counter({date(2026, 11, 3): 10})


def test_a_plain_date_is_midnight_utc(tmp_path):
    rows = [{"ts": "2026-11-05", "unit": f"U-{n}", "experiment": "exp-a", "arm": "left" if n % 2 else "right"}
            for n in range(10)]  # ISO 8601 calendar date: the whole day, read as its start
    result = audit([write_text(tmp_path / "log.csv", csv_text(rows, ["ts", "unit", "experiment", "arm"]))])
    assert audited_days(result) == Counter({date(2026, 11, 5): 10})


def test_epoch_units_are_named_in_the_notes(tmp_path):
    records = invented_records(seed=34)
    half = len(records) // 2
    write_text(tmp_path / "a.jsonl", jsonl_text(respelled(records[:half], "ts", TIME_SPELLINGS["epoch seconds"])))
    write_text(tmp_path / "b.csv", csv_text(respelled(records[half:], "ts", TIME_SPELLINGS["epoch milliseconds"])))
    result = audit([tmp_path])
    assert counts_of(result) == exp_a(records)
    notes = " | ".join(result.notes)
    assert f"{tmp_path / 'a.jsonl'}: ts read as epoch seconds in {half:,} records" in notes
    assert f"{tmp_path / 'b.csv'}: ts read as epoch milliseconds in {len(records) - half:,} records" in notes


# -- unit ids ----------------------------------------------------------------------------------------

REPLAY_CONFIG = """\
format: 1
layers:
  - name: layer-a
    unit: learner
    salt: la-1
    experiments:
      - name: exp-a
        status: running
        buckets: ["0-9999"]
        salt: ea-1
        arms:
          - {name: left, weight: 50}
          - {name: right, weight: 50}
"""


def hashing_rule_arm(unit: str) -> str:
    """The arm by the hashing rule of docs/SPEC.md, computed here with mmh3 directly: murmur3_x86_32, seed 0, mod 10000."""
    return "left" if mmh3.hash(f"ea-1:{unit}", 0, signed=False) % 10000 < 5000 else "right"


@pytest.mark.parametrize("as_number", [lambda n: n, lambda n: float(n)], ids=["integer", "integral float"])
def test_numeric_unit_ids_are_read_in_decimal_also_for_replay(tmp_path, as_number):
    from bucketing import load_config

    (tmp_path / "config.yaml").write_text(REPLAY_CONFIG)
    units = range(100_000, 100_400)
    rows = [{"ts": "2026-11-04T09:00:00Z", "unit": as_number(n), "unit_type": "learner", "layer": "layer-a",
             "experiment": "exp-a", "arm": hashing_rule_arm(str(n))} for n in units]
    path = write_text(tmp_path / "log.jsonl", jsonl_text(rows))
    result = audit_logs([str(path)], config=load_config(tmp_path / "config.yaml"), replay_units=0)
    exp, = result.results
    assert result.malformed.total == 0
    assert exp.units == len(units)
    assert (exp.replay_checked, exp.replay_mismatched) == (len(units), 0)


def test_a_fractional_unit_id_is_a_wrong_type(tmp_path):
    rows = [{"ts": "2026-11-04T09:00:00Z", "unit": u, "experiment": "exp-a", "arm": "left"} for u in ("U-1", 12.5)]
    result = audit([write_text(tmp_path / "log.jsonl", jsonl_text(rows))])
    assert result.malformed.counts == {"wrong_type": 1}
    assert result.malformed.examples[0].line == 2 and "'unit'" in result.malformed.examples[0].detail


# -- file layouts ------------------------------------------------------------------------------------

LAYOUTS = {
    "log.csv": lambda rows: csv_text(rows, delimiter=";"),
    "tabs.csv": lambda rows: csv_text(rows, delimiter="\t"),
    "log.tsv": lambda rows: csv_text(rows, delimiter="\t"),
    "bom-crlf.csv": lambda rows: csv_text(rows, newline="\r\n", bom=True),
    "quoted.csv": lambda rows: csv_text(rows, quote_all=True),
    "bom-crlf.jsonl": lambda rows: jsonl_text(rows, newline="\r\n", bom=True),
    "blank-lines.jsonl": lambda rows: jsonl_text(rows, blank_every=7),
}


@pytest.mark.parametrize("gz", [False, True], ids=["plain", "gzip"])
@pytest.mark.parametrize("name", sorted(LAYOUTS))
def test_file_layouts_count_like_python(tmp_path, name, gz):
    records = invented_records(seed=35)
    rows = respelled(records, "forced", lambda r: str(r["forced"]).lower())
    path = write_text(tmp_path / (name + (".gz" if gz else "")), LAYOUTS[name](rows), gz=gz)
    result = audit([path])
    assert result.malformed.total == 0
    assert counts_of(result) == exp_a(records)


def test_quoted_fields_keep_their_delimiters(tmp_path):
    # RFC 4180 section 2, rule 6: fields containing the delimiter are enclosed in double quotes
    rows = [{"ts": "2026-11-04T09:00:00Z", "unit": f"U-{n};x,y", "experiment": "exp-a", "arm": "left" if n % 2 else "right"}
            for n in range(20)]
    result = audit([write_text(tmp_path / "log.csv", csv_text(rows, ["ts", "unit", "experiment", "arm"], ";"))])
    assert result.results[0].units == 20


def test_lines_ending_in_crlf_and_lf_in_one_json_lines_file(tmp_path):
    records = invented_records(seed=36)
    lines = [json.dumps(r) for r in records]
    text = "".join(line + ("\r\n" if n % 2 else "\n") for n, line in enumerate(lines))
    result = audit([write_text(tmp_path / "log.jsonl", text)])
    assert result.malformed.total == 0 and counts_of(result) == exp_a(records)


def test_csv_lines_ending_in_crlf_and_lf_is_an_error_naming_the_file(sortition, tmp_path):
    rows = [{"ts": "2026-11-04T09:00:00Z", "unit": f"U-{n}", "experiment": "exp-a", "arm": "left"} for n in range(4)]
    lines = csv_text(rows, ["ts", "unit", "experiment", "arm"], newline="\r\n").split("\r\n")
    path = write_text(tmp_path / "mixed.csv", "\r\n".join(lines[:3]) + "\n" + "\n".join(lines[3:]))
    got = sortition("srm", str(path), "--expect", "50,50", "--quiet")
    assert got.exit_code == 2 and f"{path}: cannot be read as CSV" in got.stderr


def test_files_with_different_columns_are_united_by_name(tmp_path):
    records = invented_records(seed=37)
    half = len(records) // 2
    write_text(tmp_path / "a.csv", csv_text(records[:half], ["unit", "experiment", "arm", "ts", "forced"]))
    write_text(tmp_path / "b.csv", csv_text(records[half:], FIELDS[::-1]))
    result = audit([tmp_path / "a.csv", tmp_path / "b.csv"], segments=["country"])
    assert counts_of(result) == exp_a(records)
    exp, = [r for r in result.results if r.experiment == "exp-a"]
    assert sum(s.units for s in exp.segments) == exp.units  # a.csv has no country: '(none)'


def test_empty_and_header_only_files_are_skipped_with_a_note(tmp_path):
    records = invented_records(seed=38)
    write_text(tmp_path / "good.jsonl", jsonl_text(records))
    write_text(tmp_path / "empty.jsonl", "")
    write_text(tmp_path / "empty.csv.gz", "", gz=True)
    write_text(tmp_path / "header.csv", "ts,unit,experiment,arm\r\n")
    result = audit([tmp_path])
    assert counts_of(result) == exp_a(records)
    assert result.malformed.total == 0
    assert f"{tmp_path / 'empty.jsonl'}: empty; skipped" in result.notes
    assert f"{tmp_path / 'empty.csv.gz'}: empty; skipped" in result.notes
    assert f"{tmp_path / 'header.csv'}: a header and no records; skipped" in result.notes


def test_only_empty_files_is_an_error(tmp_path):
    write_text(tmp_path / "header.csv", "ts,unit,experiment,arm\n")
    with pytest.raises(LogError, match="no exposure records: every log file is empty"):
        audit([tmp_path / "header.csv"])


# -- names are compared exactly ----------------------------------------------------------------------

def test_arms_differing_by_case_or_spaces_are_unknown_and_noted(tmp_path):
    records = invented_records(seed=39)
    noisy = [{"ts": "2026-11-04T09:00:00Z", "unit": f"N-{n}", "experiment": "exp-a", "arm": arm}
             for n, arm in enumerate(["Left"] * 3 + ["right "] * 2)]
    result = audit([write_text(tmp_path / "log.jsonl", jsonl_text(records + noisy))])
    assert counts_of(result) == exp_a(records)
    unknown = {(u.arm, u.records) for u in result.unknown if u.reason == "unknown_arm"}
    assert {("Left", 3), ("right ", 2)} <= unknown
    assert any("'Left'" in n and "'left'" in n for n in result.notes)
    assert any("'right '" in n and "'right'" in n for n in result.notes)


# -- values that stay unreadable ---------------------------------------------------------------------

def test_unreadable_time_and_flag_are_located_in_csv(tmp_path):
    records = invented_records(seed=40)
    bad = [dict(records[0], ts="yesterday", unit="B-1"), dict(records[0], forced="maybe", unit="B-2")]
    rows = records[:5] + bad + records[5:]
    path = write_text(tmp_path / "log.csv", csv_text(respelled(rows, "forced", lambda r: str(r["forced"]).lower())))
    result = audit([path])
    assert result.malformed.counts == {"wrong_type": 2}
    located = {(e.line, e.detail.split(":")[0]) for e in result.malformed.examples}
    assert located == {(7, "field 'ts'"), (8, "field 'forced'")}  # line 1 is the header, records from line 2
    assert counts_of(result) == exp_a(records)


# -- the command line --------------------------------------------------------------------------------

def test_cli_reads_text_flags_and_epoch_times_and_exits_on_the_split(sortition, tmp_path):
    rows = [{"ts": str(1_793_000_000_000 + n), "unit": f"U-{n}", "experiment": "exp-a",
             "arm": "left" if n % 2 else "right", "forced": "false"} for n in range(2000)]
    path = write_text(tmp_path / "log.csv", csv_text(rows, ["ts", "unit", "experiment", "arm", "forced"]))
    got = sortition("srm", str(path), "--expect", "50,50", "--quiet", "--format", "json")
    assert got.exit_code == 0, got.output  # 1,000 / 1,000: no mismatch
    report = json.loads(got.stdout)
    assert report["results"][0]["units"] == 2000
    assert any("epoch milliseconds" in n for n in report["notes"])


def test_cli_exits_two_on_only_empty_logs(sortition, tmp_path):
    path = write_text(tmp_path / "header.csv", "ts,unit,experiment,arm\n")
    got = sortition("srm", str(path), "--expect", "50,50", "--quiet")
    assert got.exit_code == 2 and "every log file is empty" in got.stderr
    assert len(got.stderr.strip().splitlines()) == 1
