"""Exposure sinks and records: threads, rotation, failing sinks, odd attributes, de-duplication, privacy."""

import hashlib
import hmac
import json
import logging
import threading

import pytest

from bucketing import (RECORD_FIELDS, Assigner, CallbackSink, JsonLinesSink, LoggingSink, MemorySink,
                       SortitionError)
from bucketing._exposure import pseudonym
from bucketing.testing import assigner_from_yaml
from tests.conftest import SMALL


def test_json_lines_file_from_many_threads_has_every_record_whole(example_dir, tmp_path):
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path)
    assigner = Assigner(example_dir, sink=sink)

    def worker(k: int) -> None:
        for i in range(500):
            assigner.assign({"learner": f"t{k}-{i}"}).param("audio_engine")

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    sink.close()
    lines = path.read_text(encoding="utf-8").splitlines()
    records = [json.loads(line) for line in lines]
    held_out = sum(1 for k in range(6) for i in range(500) if assigner.assign({"learner": f"t{k}-{i}"}).holdout)
    assert len(records) == 3000 - held_out
    assert {r["layer"] for r in records} == {"audio-engine"}
    assert len({(r["unit"]) for r in records}) == len(records)


def test_appending_keeps_earlier_records(example_dir, tmp_path):
    path = tmp_path / "exposures.jsonl"
    path.write_text('{"earlier": true}\n')
    sink = JsonLinesSink(path)
    Assigner(example_dir, sink=sink).assign({"learner": "qa-learner-1"}).expose()
    sink.close()
    lines = path.read_text().splitlines()
    assert lines[0] == '{"earlier": true}' and len(lines) == 3


def test_dedupe_records_each_unit_arm_once_per_process(example_dir):
    sink = MemorySink()
    assigner = Assigner(example_dir, sink=sink, dedupe=True)
    for _ in range(3):
        assigner.assign({"learner": "qa-learner-1"}).param("lesson_minutes")
    assert len(sink.records) == 1
    plain = MemorySink()
    assigner = Assigner(example_dir, sink=plain)
    for _ in range(3):
        assigner.assign({"learner": "qa-learner-1"}).param("lesson_minutes")
    assert len(plain.records) == 3


def test_logging_sink_emits_json_text(example_dir, caplog):
    assigner = Assigner(example_dir, sink=LoggingSink("test.exposures"))
    with caplog.at_level(logging.INFO, logger="test.exposures"):
        assigner.assign({"learner": "qa-learner-1"}).param("lesson_minutes")
    assert len(caplog.records) == 1
    assert json.loads(caplog.records[0].getMessage())["arm"] == "short"
    assert caplog.records[0].exposure["experiment"] == "shorter-lessons"


def test_failing_callback_is_counted_not_raised(example_dir):
    def broken(record):
        raise RuntimeError("queue full")

    seen = []
    assigner = Assigner(example_dir, sink=CallbackSink(broken))
    assert assigner.assign({"learner": "qa-learner-1"}).param("lesson_minutes") == 6
    assert assigner.errors["sink"] == 1
    Assigner(example_dir, sink=CallbackSink(seen.append)).assign({"learner": "qa-learner-1"}).expose()
    assert {r["layer"] for r in seen} == {"lesson-flow", "audio-engine"}


# The shared small config (tests/conftest.py), its experiment targeting country.
TARGETS_COUNTRY = SMALL.replace("overrides: {qa-1: big}", "eligible: {country: [NL, BE]}\n        overrides: {qa-1: big}")


def strict_json(line: str) -> dict:
    """json.loads that refuses NaN and Infinity, as every JSON reader outside Python does."""
    def refuse(constant):
        raise ValueError(f"not JSON: {constant}")
    return json.loads(line, parse_constant=refuse)


def test_renamed_file_is_reopened_and_no_record_goes_to_the_old_one(tmp_path):
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path, check_every=0)
    sink.write({"n": 1})
    path.rename(tmp_path / "exposures.jsonl.1")
    sink.write({"n": 2})
    sink.write({"n": 3})
    sink.close()
    assert [strict_json(x)["n"] for x in (tmp_path / "exposures.jsonl.1").read_text().splitlines()] == [1]
    assert [strict_json(x)["n"] for x in path.read_text().splitlines()] == [2, 3]
    assert sink.reopened == 1


def test_deleted_file_is_created_again(tmp_path):
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path, check_every=0)
    sink.write({"n": 1})
    path.unlink()
    sink.write({"n": 2})
    sink.close()
    assert path.read_text() == '{"n":2}\n' and sink.reopened == 1


def test_rotation_is_checked_at_most_every_interval(tmp_path, monkeypatch):
    clock = [1000.0]
    monkeypatch.setattr("bucketing._exposure.monotonic", lambda: clock[0])
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path, check_every=1.0)
    path.rename(tmp_path / "old.jsonl")
    sink.write({"n": 1})
    clock[0] += 1.0
    sink.write({"n": 2})
    sink.close()
    assert (tmp_path / "old.jsonl").read_text() == '{"n":1}\n' and path.read_text() == '{"n":2}\n'


def test_size_rotation_keeps_the_newest_records_in_bounded_files(tmp_path):
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path, max_bytes=200, backups=2)
    for n in range(100):
        sink.write({"n": n, "pad": "x" * 20})
    sink.close()
    files = [path, tmp_path / "exposures.jsonl.1", tmp_path / "exposures.jsonl.2"]
    assert not (tmp_path / "exposures.jsonl.3").exists()
    assert all(0 < f.stat().st_size <= 200 for f in files)
    kept = [strict_json(x)["n"] for f in reversed(files) for x in f.read_text().splitlines()]
    assert kept == list(range(100 - len(kept), 100)) and sink.rotated >= 2


def test_a_rotation_that_fails_loses_no_record(tmp_path, caplog):
    path = tmp_path / "exposures.jsonl"
    (tmp_path / "exposures.jsonl.1").mkdir()
    (tmp_path / "exposures.jsonl.1" / "in-the-way").write_text("")
    sink = JsonLinesSink(path, max_bytes=50, backups=1)
    with caplog.at_level(logging.WARNING, logger="bucketing.sinks"):
        for n in range(10):
            sink.write({"n": n, "pad": "x" * 20})
    sink.close()
    assert [strict_json(x)["n"] for x in path.read_text().splitlines()] == list(range(10))
    assert caplog.records and "could not be rotated" in caplog.records[0].getMessage()


def test_sink_failures_are_counted_and_logged_at_most_once_a_minute(example_dir, caplog, monkeypatch):
    clock = [5000.0]
    monkeypatch.setattr("bucketing._exposure.monotonic", lambda: clock[0])

    def broken(record):
        raise OSError("disk full")

    assigner = Assigner(example_dir, sink=CallbackSink(broken))
    with caplog.at_level(logging.WARNING, logger="bucketing.sinks"):
        for i in range(50):
            assigner.assign({"learner": "qa-learner-1"}).expose()
        clock[0] += 60
        assigner.assign({"learner": "qa-learner-1"}).expose()
    assert assigner.errors["sink"] == 102  # two forced layers per call
    messages = [r.getMessage() for r in caplog.records]
    assert len(messages) == 2
    assert "failed 1 time(s)" in messages[0] and "failed 100 time(s)" in messages[1] and "disk full" in messages[1]


def test_nan_and_infinity_become_text_only_for_that_attribute(tmp_path):
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path)
    assigner = assigner_from_yaml(TARGETS_COUNTRY, sink=sink, record_attributes=("score", "tags", "note"))
    attrs = {"country": "NL", "score": float("inf"), "tags": [1.0, float("nan")], "note": "ok\ud800"}
    assert assigner.assign({"learner": "qa-1"}, attrs).param("size") == 2
    sink.close()
    record = strict_json(path.read_text(encoding="utf-8"))
    assert record["country"] == "NL" and record["arm"] == "big"
    assert record["score"] == "inf" and record["tags"] == "[1.0, nan]" and record["note"] == "ok\\ud800"
    assert assigner.errors["attribute_not_json"] == 3 and assigner.errors["sink"] == 0


@pytest.mark.parametrize("attrs", [["country", "NL"], "NL", 7, object()])
def test_attributes_that_are_not_a_mapping_never_raise(attrs):
    sink = MemorySink()
    assigner = assigner_from_yaml(TARGETS_COUNTRY, sink=sink)
    got = assigner.assign({"learner": "qa-1"}, attrs)
    assert got.param("size") == 2 and got.param(None, "d") == "d"  # type: ignore[arg-type]
    got.expose()
    got.expose(42)  # type: ignore[arg-type]
    assert [r["arm"] for r in sink.records] == ["big"] and "country" not in sink.records[0]
    assert assigner.errors["attributes"] == 1 and assigner.errors["sink"] == 0


def test_assign_many_with_fewer_attributes_than_ids_never_raises():
    assigner = assigner_from_yaml(TARGETS_COUNTRY)
    got = list(assigner.assign_many("learner", ["a", "b", "qa-1", "c"], [{"country": "NL"}, {"country": "BE"}]))
    assert [g.units["learner"] for g in got] == ["a", "b", "qa-1", "c"]
    assert got[2].arm("flow") == "big" and got[3].arm("flow") is None
    assert assigner.errors["attributes_ran_out"] == 2
    assert [g.arm("flow") for g in assigner.assign_many("learner", ["qa-1"], 7)] == ["big"]  # type: ignore[arg-type]
    assert assigner.errors["attributes"] == 1


def test_dedupe_forgets_the_least_recently_seen_unit_first():
    sink = MemorySink()
    assigner = assigner_from_yaml(TARGETS_COUNTRY.replace("{qa-1: big}", "{a: big, b: big, c: big}"),
                                  sink=sink, dedupe=True, dedupe_limit=2)
    for unit in ["a", "b", "a", "c", "a", "b"]:
        assigner.assign({"learner": unit}).expose()
    # a, b new; a seen (now most recent); c new, b forgotten; a seen; b new again, c forgotten.
    assert [r["unit"] for r in sink.records] == ["a", "b", "c", "b"]
    assert len(assigner._exposer._seen) == 2  # type: ignore[union-attr]


def test_records_carry_only_targeted_and_named_attributes():
    attrs = {"country": "NL", "email": "learner@example.invalid", "latitude": 52.37, "platform": "ios"}
    plain, named = MemorySink(), MemorySink()
    assigner_from_yaml(TARGETS_COUNTRY, sink=plain).assign({"learner": "qa-1"}, attrs).expose()
    assigner_from_yaml(TARGETS_COUNTRY, sink=named, record_attributes=["platform"]).assign(
        {"learner": "qa-1"}, attrs).expose()
    assert set(plain.records[0]) == set(RECORD_FIELDS) | {"country"}
    assert set(named.records[0]) == set(RECORD_FIELDS) | {"country", "platform"}
    one = MemorySink()
    assigner_from_yaml(TARGETS_COUNTRY, sink=one, record_attributes="platform").assign({"learner": "qa-1"}, attrs).expose()
    assert set(one.records[0]) == set(named.records[0]), "one name given as text is that name, not its letters"


def test_an_attribute_cannot_overwrite_a_record_field():
    sink = MemorySink()
    assigner_from_yaml(TARGETS_COUNTRY, sink=sink, record_attributes=["arm", "unit"]).assign(
        {"learner": "qa-1"}, {"arm": "forged", "unit": "someone-else"}).expose()
    assert sink.records[0]["arm"] == "big" and sink.records[0]["unit"] == "qa-1"


def test_pseudonym_is_hmac_sha256_of_the_unit_id():
    # RFC 4231, test case 2: HMAC-SHA256 with key "Jefe" of "what do ya want for nothing?".
    assert pseudonym(b"Jefe", "what do ya want for nothing?") == \
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"


def test_records_carry_pseudonyms_keyed_from_the_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("LEARNING_APP_UNIT_KEY", "an invented secret")
    path = tmp_path / "exposures.jsonl"
    sink = JsonLinesSink(path)
    assigner = assigner_from_yaml(TARGETS_COUNTRY, sink=sink, pseudonym_key_env="LEARNING_APP_UNIT_KEY")
    got = assigner.assign({"learner": "qa-1"}, {"country": "NL"})
    got.expose()
    sink.close()
    text = path.read_text()
    expected = hmac.new(b"an invented secret", b"qa-1", hashlib.sha256).hexdigest()
    assert strict_json(text)["unit"] == expected and "qa-1" not in text
    assert got.units == {"learner": "qa-1"}, "the service still sees the real id"


def test_missing_pseudonym_key_refuses_to_start(monkeypatch):
    monkeypatch.delenv("LEARNING_APP_UNIT_KEY", raising=False)
    with pytest.raises(SortitionError, match="LEARNING_APP_UNIT_KEY"):
        assigner_from_yaml(TARGETS_COUNTRY, sink=MemorySink(), pseudonym_key_env="LEARNING_APP_UNIT_KEY")
    monkeypatch.setenv("LEARNING_APP_UNIT_KEY", "")
    with pytest.raises(SortitionError, match="unset or empty"):
        assigner_from_yaml(TARGETS_COUNTRY, sink=MemorySink(), pseudonym_key_env="LEARNING_APP_UNIT_KEY")
