"""Hostile logs: `srm` counts every record and stops for nothing (over-long lines, gzip bombs, cut-short files,
bytes that are not UTF-8, open CSV quotes, symbolic-link loops, devices and FIFOs, odd keys). All data invented."""

import gzip
import json
import os
import threading

import pytest

from audit import LogError, audit_logs
from audit.srm import engine_named, resolve_files
from tests.test_logs_formats import REPLAY_CONFIG
from tests.invented_logs import counts_of, invented_records, python_counts, write_csv_with_lines, write_jsonl

SMALL_CAP = 4096  # the line cap the tests lower, so that an over-long line stays small
MAX_LINE_BYTES = 1 << 20  # the default cap, as docs/SPEC.md states it


def record(n: int, **changes) -> dict:
    base = {"ts": "2026-11-04T09:00:00.000Z", "unit": f"U-{n}", "layer": "layer-a", "experiment": "exp-a",
            "arm": "left" if n % 2 else "right"}
    return dict(base, **changes)


def lines(first: int, last: int) -> list[str]:
    return [json.dumps(record(n)) for n in range(first, last)]


def audit(paths, cap: int | None = None, **options):
    engine = engine_named("duckdb", max_line_bytes=cap) if cap else "duckdb"
    return audit_logs([str(p) for p in paths], expect={"left": 50, "right": 50}, replay_units=0, engine=engine,
                      **options)


def units(result) -> int:
    return sum(r.units for r in result.results)


# -- over-long lines ------------------------------------------------------------------------------


@pytest.mark.parametrize("over", [1, 3 * SMALL_CAP])
def test_a_line_over_the_cap_is_one_malformed_record_with_its_line(tmp_path, over):
    path = tmp_path / "long.jsonl"
    long_line = '{"unit": "' + "x" * (SMALL_CAP + over - 12) + '"}'
    assert len(long_line) == SMALL_CAP + over
    path.write_text("\n".join(lines(0, 50) + [long_line] + lines(50, 100)) + "\n")
    result = audit([path], cap=SMALL_CAP)
    assert result.malformed.counts == {"too_long": 1}
    example, = result.malformed.examples
    assert (example.file, example.line, example.kind) == (str(path), 51, "too_long")
    assert f"{SMALL_CAP + over:,} bytes" in example.detail and example.text.startswith('{"unit": "xxx')
    assert units(result) == 100 and result.records == 101


def test_a_line_at_the_cap_is_read(tmp_path):
    path = tmp_path / "edge.jsonl"
    padded = json.dumps(record(7, pad="p" * SMALL_CAP))
    padded = json.dumps(record(7, pad="p" * (SMALL_CAP - len(padded) + SMALL_CAP)))
    assert len(padded) == SMALL_CAP
    path.write_text("\n".join(lines(0, 7) + [padded] + lines(8, 20)) + "\n")
    result = audit([path], cap=SMALL_CAP)
    assert result.malformed.total == 0 and units(result) == 20


def test_a_line_over_the_default_cap_is_counted(tmp_path):
    path = tmp_path / "long.jsonl"
    path.write_text("\n".join(lines(0, 10) + ['{"unit": "' + "x" * MAX_LINE_BYTES + '"}'] + lines(10, 20)))
    result = audit([path])
    assert result.malformed.counts == {"too_long": 1} and result.malformed.examples[0].line == 11
    assert units(result) == 20


def test_a_gzip_bomb_is_one_malformed_line_and_the_other_files_are_audited(tmp_path):
    bomb = tmp_path / "bomb.jsonl.gz"
    with gzip.open(bomb, "wb") as out:  # 8 MB of one line, 8 KB compressed
        out.write(b'{"unit": "')
        for _ in range(8):
            out.write(b"z" * (1 << 20))
        out.write(b'"}\n')
    assert bomb.stat().st_size < 64 * 1024
    good = write_jsonl(tmp_path / "good.jsonl", [record(n) for n in range(40)])
    result = audit([bomb, good], cap=64 * 1024)
    assert result.malformed.counts == {"too_long": 1}
    example, = result.malformed.examples
    assert (example.file, example.line) == (str(bomb), 1)
    assert units(result) == 40 and result.records == 41
    with pytest.raises(LogError, match=r"bomb.jsonl.gz:1: no usable exposure record .*over the limit"):
        audit([bomb], cap=64 * 1024)


def test_a_csv_line_over_the_cap_is_counted(tmp_path):
    records = invented_records(seed=31)
    path = write_csv_with_lines(tmp_path / "log.csv", records, {
        5: "2026-11-04T09:00:00.000Z,U-9," + "q" * SMALL_CAP + ",layer-a,exp-a,left,0123456789ab,false,AA"})
    result = audit([path], cap=SMALL_CAP)
    assert result.malformed.counts == {"too_long": 1} and result.malformed.examples[0].line == 5
    assert counts_of(result) == {k: v for k, v in python_counts(records).items() if k[0] == "exp-a"}


# -- files that cannot be read, and bytes that are not text ---------------------------------------


def test_a_cut_short_gzip_is_named_and_the_rest_audited(tmp_path, sortition):
    whole = gzip.compress("".join(line + "\n" for line in lines(0, 3000)).encode())
    cut = tmp_path / "cut.jsonl.gz"
    cut.write_bytes(whole[:len(whole) // 2])
    good = write_jsonl(tmp_path / "good.jsonl", [record(n) for n in range(5000, 5040)])
    result = audit([cut, good])
    assert units(result) == 40
    assert result.unreadable_files == ((str(cut), "the gzip stream ends early: the file is cut short"),)
    assert any(note.startswith(f"{cut}: cannot be read") for note in result.notes)

    report = sortition("srm", cut, good, "--expect", "50,50", "--quiet")
    assert report.exit_code == 0, report.output
    assert sum(str(cut) in line for line in report.stdout.splitlines()) == 1
    strict = sortition("srm", cut, good, "--expect", "50,50", "--quiet", "--strict")
    assert strict.exit_code == 2 and str(cut) in strict.stderr and len(strict.stderr.splitlines()) == 1
    alone = sortition("srm", cut, "--expect", "50,50", "--quiet")
    assert alone.exit_code == 2 and "no log file could be read" in alone.stderr and str(cut) in alone.stderr


@pytest.mark.parametrize("where", [0, 1, 400])
def test_invalid_utf8_is_one_malformed_record_wherever_it_is(tmp_path, where):
    text = lines(0, 500)
    text.insert(where, '{"unit": "caf\xe9"}')
    path = tmp_path / "latin.jsonl"
    path.write_bytes("\n".join(text).encode("latin-1") + b"\n")
    result = audit([path])
    assert result.malformed.counts == {"unparseable": 1}
    assert result.malformed.examples[0].line == where + 1
    assert units(result) == 500


def test_a_csv_header_that_is_not_utf8_skips_only_that_file(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"ts,unit,experiment,arm,pa\xefs\n2026-11-04,U-1,exp-a,left,x\n")
    good = write_jsonl(tmp_path / "good.jsonl", [record(n) for n in range(30)])
    result = audit([bad, good])
    assert units(result) == 30
    (file, why), = result.unreadable_files
    assert file == str(bad) and "not UTF-8" in why


def test_a_csv_quote_left_open_costs_exactly_its_record(tmp_path):
    records = invented_records(seed=32)
    path = write_csv_with_lines(tmp_path / "log.csv", records, {
        7: '2026-11-04T09:00:00.000Z,"U-9,learner,layer-a,exp-a,left,0123456789ab,false,AA',
        10: '2026-11-04T09:00:00.000Z,"U-8,learner,"layer-a",exp-a,left,0123456789ab,false,AA'})
    result = audit([path])
    assert result.malformed.counts == {"unparseable": 2}
    assert [e.line for e in result.malformed.examples] == [7, 10]
    assert "quote" in result.malformed.examples[0].detail
    assert counts_of(result) == {k: v for k, v in python_counts(records).items() if k[0] == "exp-a"}
    assert result.records == len(records) + 2


def test_quoted_csv_fields_with_delimiters_still_read(tmp_path):
    path = tmp_path / "quoted.csv"
    rows = ["ts,unit,layer,experiment,arm"] + [f'2026-11-04T09:00:00Z,"U-{n},x",layer-a,"exp-a",{"left" if n % 2 else "right"}'
                                               for n in range(60)]
    path.write_text("\n".join(rows) + "\n")
    result = audit([path])
    assert result.malformed.total == 0 and units(result) == 60


# -- paths ------------------------------------------------------------------------------------------


def test_a_symlink_loop_under_a_double_star_glob_reads_each_file_once(tmp_path):
    logs = tmp_path / "logs"
    logs.mkdir()
    write_jsonl(logs / "day1.jsonl", [record(n) for n in range(20)])
    (logs / "again").symlink_to(logs, target_is_directory=True)  # logs/again/again/... loops
    (logs / "same.jsonl").symlink_to(logs / "day1.jsonl")
    files = resolve_files([str(logs / "**" / "*.jsonl"), str(logs / "day1.jsonl"), str(logs)])
    assert [f.path for f in files] == [str(logs / "day1.jsonl")]
    assert audit([logs / "**" / "*.jsonl"]).records == 20


def test_a_device_or_a_fifo_is_not_a_regular_file(tmp_path, sortition):
    fifo = tmp_path / "pipe.jsonl"
    os.mkfifo(fifo)
    writer_opened = threading.Event()

    def unblock() -> None:  # if anything opened the FIFO, this would let it end instead of hanging the suite
        if not writer_opened.wait(20):
            with open(fifo, "w"):
                pass

    threading.Thread(target=unblock, daemon=True).start()
    try:
        for path in ("/dev/zero", str(fifo)):
            got = sortition("srm", path, "--expect", "50,50", "--quiet")
            assert got.exit_code == 2
            assert got.stderr.strip().splitlines() == [f"sortition: {path}: not a regular file "
                                                       f"({'a device' if path == '/dev/zero' else 'a FIFO (named pipe)'}); "
                                                       "give log files, globs or directories"]
    finally:
        writer_opened.set()


# -- keys with characters that mean something in a JSON path ----------------------------------------


ODD_KEYS = ["app\\version", 'say "hi"', "a.b", "list[0]", "$.root", "päys", "a/b~c", "1"]


def test_odd_attribute_keys_are_read_as_segments_and_by_auto(tmp_path):
    rows = [dict(record(n), **{key: f"v{n % 3}" for key in ODD_KEYS}) for n in range(90)]
    path = write_jsonl(tmp_path / "odd.jsonl", rows)
    named = audit([path], segments=ODD_KEYS)
    automatic = audit([path], auto_segments=True)
    for result in (named, automatic):
        segments = result.results[0].segments
        for key in ODD_KEYS:
            assert {s.by[key]: s.units for s in segments if list(s.by) == [key]} == {"v0": 30, "v1": 30, "v2": 30}
    assert set(automatic.segment_terms) == {(key,) for key in ODD_KEYS}


# -- dates and many experiments -----------------------------------------------------------------------


def test_implausible_dates_are_outside_the_window_with_a_note(tmp_path):
    odd = [record(900, ts="9999-12-31T23:59:59Z"), record(901, ts="2999-06-01T00:00:00Z"),
           record(902, ts="1970-01-01T00:00:00Z"), record(903, ts=str(10**19))]  # 10^19 ns after 1970: year 2286
    path = write_jsonl(tmp_path / "dates.jsonl", [record(n) for n in range(40)] + odd)
    result = audit([path])
    experiment, = result.results
    assert experiment.units == 40 and experiment.outside_window_records == 4
    assert [d.day.isoformat() for d in experiment.days] == ["2026-11-04"]
    note, = [n for n in result.notes if n.startswith("4 records dated outside 2000-01-01")]
    assert "(from 1970-01-01 to 9999-12-31) are implausible" in note


def test_days_are_the_days_with_units(tmp_path):
    rows = [record(n, ts="2026-01-02T10:00:00Z") for n in range(20)] + \
        [record(n, ts="2026-12-01T10:00:00Z") for n in range(20, 50)]
    result = audit([write_jsonl(tmp_path / "two-days.jsonl", rows)])
    days = result.results[0].days
    assert [(d.day.isoformat(), sum(d.arm_units)) for d in days] == [("2026-01-02", 20), ("2026-12-01", 30)]
    assert days[-1].cumulative_p == result.results[0].p_value


def test_many_experiments_of_an_expected_split_are_each_counted(tmp_path):
    rows = [record(n, experiment=f"exp-{n % 700:03d}", arm=("left", "right")[(n // 700) % 2]) for n in range(2800)]
    rows += [record(n, experiment="exp-odd", arm="left", unit="twice") for n in range(2)]
    result = audit([write_jsonl(tmp_path / "many.jsonl", rows)])
    assert len(result.results) == 701
    by_name = {r.experiment: r for r in result.results}
    assert all([a.units for a in by_name[f"exp-{k:03d}"].arms] == [2, 2] for k in range(700))
    assert by_name["exp-odd"].units == 1 and by_name["exp-odd"].duplicate_records == 1


# -- names with terminal escapes, column mappings, targeting the logs do not carry -------------------

ESCAPES = "\x1b]0;owned\x07\x1b[2J\u202e"  # sets the terminal title, clears the screen, reverses the text


def test_the_text_report_escapes_control_characters_and_the_html_keeps_escaping(tmp_path, sortition):
    rows = [dict(record(n, experiment="exp" + ESCAPES + "<script>x</script>", arm=("right" + ESCAPES, "left")[n % 3 > 0]),
                 country=("BB", "AA" + ESCAPES)[n % 2]) for n in range(900)]  # a 1:2 split, so the arms are listed
    path = write_jsonl(tmp_path / "escapes.jsonl", rows)
    text = sortition("srm", path, "--expect", "50,50", "--by", "country", "--quiet")
    assert text.exit_code == 1, text.output
    assert not any(ch in text.stdout for ch in "\x1b\x07\u202e")
    assert "exp\\x1b]0;owned\\x07\\x1b[2J\\u202e<script>" in text.stdout and "country=AA\\x1b]0;owned" in text.stdout
    html = sortition("srm", path, "--expect", "50,50", "--by", "country", "--quiet", "--format", "html",
                     "--out", tmp_path / "report.html")
    assert html.exit_code == 1
    page = (tmp_path / "report.html").read_text()
    assert "<script>x</script>" not in page and "&lt;script&gt;x&lt;/script&gt;" in page


def test_column_maps_attributes_too(tmp_path):
    rows = [dict(record(n), appVer=("7.1", "7.2")[n % 3 == 0]) for n in range(60)]
    path = write_jsonl(tmp_path / "theirs.jsonl", rows)
    result = audit([path], segments=["app_version"], columns={"app_version": "appVer"})
    assert {s.by["app_version"]: s.units for s in result.results[0].segments} == {"7.2": 20, "7.1": 40}


@pytest.mark.parametrize("writer", ["jsonl", "csv"])
def test_a_mapping_to_a_column_the_logs_lack_lists_theirs(tmp_path, sortition, writer):
    records = invented_records(seed=33, units=30)
    path = (write_jsonl(tmp_path / "log.jsonl", records) if writer == "jsonl"
            else write_csv_with_lines(tmp_path / "log.csv", records, {}))
    for mapping in (["--column", "bogus=app_ver"], ["--column", "layer=tier"], ["--column", "country=nation"]):
        got = sortition("srm", path, "--expect", "50,50", "--by", "country", "--quiet", *mapping)
        assert got.exit_code == 2, got.output
        column = mapping[1].split("=")[1]
        assert got.stderr.strip().splitlines() == [
            f"sortition: {mapping[1]}: the logs have no column {column!r} (columns: "
            f"ts, unit, unit_type, layer, experiment, arm, config, forced, country)".replace(
                "(columns: ts, unit, unit_type, layer, experiment, arm, config, forced, country)",
                "(columns: " + ", ".join(sorted(records[0]) if writer == "jsonl" else list(records[0])) + ")")]


# the invented replay config of the format tests, its experiment targeting a key with a backslash
TARGETED_CONFIG = REPLAY_CONFIG.replace("        salt: ea-1\n", '        salt: ea-1\n        eligible:\n          "app\\\\ver": ">=7.2"\n')


def test_a_replay_of_targeting_the_logs_do_not_carry_says_so(tmp_path):
    from bucketing import Assigner, load_config

    (tmp_path / "config.yaml").write_text(TARGETED_CONFIG)
    config = load_config(tmp_path / "config.yaml")
    key, = config.layers[0].experiments[0].eligible
    assert key == "app\\ver"  # a backslash in the key, read through the JSON path as well
    assigner = Assigner(config)
    rows = []
    for n in range(300):
        arm = assigner.assign({"learner": f"U-{n}"}, {key: "7.3"}).layers["layer-a"].arm
        rows.append(dict(record(n, arm=arm, unit_type="learner"), **({key: "7.3"} if n < 200 else {})))
    path = write_jsonl(tmp_path / "log.jsonl", rows)
    result = audit_logs([str(path)], config=config)
    exp, = result.results
    assert (exp.replay_checked, exp.replay_mismatched) == (200, 0)
    assert not any(c.kind == "arm_mismatch" for c in exp.causes)
    assert any(n.startswith("exp-a: 100 units were not replayed: the config targets attribute 'app\\\\ver'")
               for n in result.notes)


def test_a_units_file_with_a_line_that_is_not_utf8_names_the_file_and_line(tmp_path, sortition, example_dir):
    units = tmp_path / "units.txt"
    units.write_bytes(b"L-1\nL-\xff2\nL-3\n")
    got = sortition("assign", example_dir, "--units", units, "--unit-type", "learner")
    assert got.exit_code == 2
    assert got.stderr.strip().splitlines() == [f"sortition: {units}:2: not UTF-8 text (byte 3 of the line)"]
