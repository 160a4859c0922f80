"""Exposure sinks: files from many threads, logging, callbacks, de-duplication, failing sinks."""

import json
import logging
import threading

from bucketing import Assigner, CallbackSink, JsonLinesSink, LoggingSink, MemorySink


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
