"""The audit as a library: `from audit import ...` gives the same results as the command line (invented data)."""

import dataclasses
import json
from datetime import date
from importlib import metadata

import duckdb
import pandas as pd
import pyarrow as pa
import pytest

import audit
import bucketing
from audit import AuditError, SortitionError, audit_logs, check_config, diff_configs, layout_of
from bucketing import Assigner, MemorySink
from tests.conftest import CHECK_FIXTURES, EXAMPLE, ROOT
from tests.invented_logs import invented_records

SPLIT = {"left": 50, "right": 50}


@pytest.fixture(scope="module")
def records():
    return pd.DataFrame(invented_records(seed=21, units=600))


@pytest.fixture
def cli_json(sortition):
    """What `sortition ARGS... --format json` prints, parsed."""

    def run(*args) -> dict:
        done = sortition(*args, "--format", "json")
        assert done.exit_code in (0, 1), done.stderr
        return json.loads(done.stdout)

    return run


def _without_sources(report: dict) -> dict:
    """The report but for the names of what was read (a file path, or a label for an in-memory table)."""
    return {k: v for k, v in report.items() if k != "files"}


def test_a_dataframe_audits_as_the_same_records_in_parquet_on_the_command_line(cli_json, records, tmp_path):
    path = tmp_path / "records.parquet"
    records.to_parquet(path)
    from_cli = cli_json("srm", path, "--expect", "left=50,right=50", "--by", "country", "--quiet")
    from_frame = audit_logs(records, expect=SPLIT, segments=["country"])
    assert from_cli["results"] and from_cli["results"][0]["segments"]
    assert _without_sources(from_frame.to_dict()) == _without_sources(from_cli)
    assert from_frame.files == ("<pandas.DataFrame>",)


def test_an_arrow_table_and_a_duckdb_relation_audit_like_the_dataframe(records):
    expected = audit_logs(records, expect=SPLIT, segments=["country"]).to_dict()
    relation = duckdb.connect().from_df(records)
    for table in (pa.Table.from_pandas(records), relation):
        got = audit_logs(table, expect=SPLIT, segments=["country"]).to_dict()
        assert _without_sources(got) == _without_sources(expected)


def test_a_config_path_and_a_single_path_are_accepted(tmp_path):
    log = tmp_path / "log.jsonl"
    log.write_text('{"ts": "2026-11-04T09:00:00Z", "unit": "L-1", "experiment": "shorter-lessons", "arm": "short"}\n')
    result = audit_logs(log, config=EXAMPLE, replay_units=0)
    assert [r.experiment for r in result.results] == ["shorter-lessons"] and result.records == 1


def test_results_are_frozen(records):
    result = audit_logs(records, expect=SPLIT)
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.threshold = 0.5  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.results[0].srm = True  # type: ignore[misc]
    assert isinstance(result.results, tuple) and isinstance(result.results[0].arms, tuple)


def test_library_errors_share_one_base_and_name_no_option(records):
    with pytest.raises(SortitionError) as raised:
        audit_logs(records)
    assert isinstance(raised.value, AuditError) and "--" not in str(raised.value)
    with pytest.raises(SortitionError, match="unknown counting engine 'abacus'"):
        audit_logs(records, expect=SPLIT, engine="abacus")
    with pytest.raises(SortitionError) as raised:
        audit_logs(records.drop(columns=["unit"]), expect=SPLIT)
    assert "no column 'unit'" in str(raised.value) and "--" not in str(raised.value)


def test_check_diff_and_layout_give_what_the_command_line_prints(cli_json):
    fixture = CHECK_FIXTURES / "arm-zero-weight.yaml"
    assert check_config(fixture, day=date(2026, 11, 15)).to_dict() == cli_json("check", fixture, "--day", "2026-11-15")
    assert diff_configs(EXAMPLE, EXAMPLE).to_dict() == cli_json("diff", EXAMPLE, EXAMPLE)
    assert layout_of(EXAMPLE, want=10).to_dict() == cli_json("layout", EXAMPLE, "--want", "10")
    assert check_config(fixture).findings[0].rule == "arm-zero-weight"


def test_the_version_is_the_installed_one(sortition):
    assert audit.__version__ == bucketing.__version__ == metadata.version("sortition")
    done = sortition("--version")
    assert done.exit_code == 0 and done.stdout.strip() == f"sortition {audit.__version__}"


def test_the_command_line_names_an_unknown_engine(sortition, tmp_path):
    log = tmp_path / "log.jsonl"
    log.write_text('{"ts": "2026-11-04T09:00:00Z", "unit": "L-1", "experiment": "e", "arm": "a"}\n')
    got = sortition("srm", log, "--expect", "100", "--engine", "abacus", "--quiet")
    assert got.exit_code == 2 and "unknown counting engine 'abacus'; the engines are duckdb" in got.stderr


def test_the_readme_notebook_snippet_runs(tmp_path, capsys):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## In a notebook"):]
    snippet = section[section.index("```python") + len("```python"):section.index("```", section.index("```python") + 3)]
    sink = MemorySink()
    assigner = Assigner(EXAMPLE, sink=sink)
    for i in range(3000):  # invented learners, exposed through the SDK
        attrs = {"country": ("NL", "DE", "BR")[i % 3], "platform": ("ios", "web")[i % 2], "app_version": "7.4.0"}
        assigner.assign({"learner": f"n-{i}"}, attrs, day=date(2026, 11, 20)).param("lesson_minutes")
    pd.DataFrame(sink.records).to_parquet(tmp_path / "exposures.parquet")
    namespace: dict = {}
    exec(compile(snippet.replace('"exposures.parquet"', repr(str(tmp_path / "exposures.parquet")))
                 .replace('"configs/"', repr(str(EXAMPLE))), "README.md", "exec"), namespace)
    assert namespace["result"].results and "shorter-lessons" in capsys.readouterr().out
