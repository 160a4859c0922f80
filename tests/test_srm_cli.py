"""`sortition srm` on the command line: exit codes, one-line errors, JSON on stdout only."""

import json


from tests.invented_logs import invented_records, write_csv, write_jsonl


def srm(sortition, *args):
    return sortition("srm", *args, "--quiet")


def balanced_log(tmp_path):
    records = []
    for n in range(2000):
        records.append({"ts": "2026-11-04T09:00:00.000Z", "unit": f"U-{n}", "unit_type": "learner",
                        "layer": "layer-a", "experiment": "exp-a", "arm": "left" if n % 2 else "right",
                        "config": "0123456789ab", "forced": False, "country": "AA" if n % 3 else "BB"})
    return write_jsonl(tmp_path / "balanced.jsonl", records)


def skewed_log(tmp_path):
    records = [{"ts": "2026-11-04T09:00:00.000Z", "unit": f"U-{n}", "layer": "layer-a", "experiment": "exp-a",
                "arm": "left" if n % 5 else "right"} for n in range(2000)]
    return write_jsonl(tmp_path / "skewed.jsonl", records)


def test_balanced_split_exits_zero_with_contract_json(sortition, tmp_path):
    got = srm(sortition, balanced_log(tmp_path), "--expect", "50,50", "--by", "country", "--format", "json")
    assert got.exit_code == 0, got.output
    report = json.loads(got.stdout)
    assert set(report) >= {"threshold", "results", "malformed"}
    result, = report["results"]
    assert set(result) >= {"layer", "experiment", "units", "arms", "chi2", "df", "p_value", "srm", "multi_arm_units",
                           "duplicate_records", "replay_mismatch_share", "first_srm_day", "segments"}
    assert set(result["arms"][0]) >= {"arm", "units", "expected_share", "observed_share"}
    assert set(result["segments"][0]) >= {"by", "units", "p_value", "p_adjusted", "srm"}
    assert result["units"] == 2000 and result["srm"] is False


def test_mismatch_exits_one(sortition, tmp_path):
    got = srm(sortition, skewed_log(tmp_path), "--expect", "left=50,right=50")
    assert got.exit_code == 1
    assert "MISMATCH" in got.stdout and "exp-a" in got.stdout


def test_unreadable_input_exits_two_with_one_line(sortition, tmp_path):
    for args in ([tmp_path / "missing.jsonl", "--expect", "50,50"],
                 [write_csv(tmp_path / "x.csv", invented_records(), names={"unit": "uid"}), "--expect", "50,50"],
                 [balanced_log(tmp_path)],
                 [balanced_log(tmp_path), "--config", tmp_path / "nope.yaml"],
                 [balanced_log(tmp_path), "--expect", "half,half"],
                 [balanced_log(tmp_path), "--expect", "50,50", "--column", "unit"],
                 [balanced_log(tmp_path), "--expect", "50,50", "--config-versions", tmp_path / "none"]):
        got = srm(sortition, *args)
        assert got.exit_code == 2, (args, got.output)
        assert got.stdout == ""
        assert len(got.stderr.strip().splitlines()) == 1 and "Traceback" not in got.stderr


def test_missing_column_error_names_file_and_field(sortition, tmp_path):
    path = write_csv(tmp_path / "theirs.csv", invented_records(), names={"unit": "user_id"})
    got = srm(sortition, path, "--expect", "50,50")
    assert "theirs.csv" in got.stderr and "'unit'" in got.stderr and "--column unit=" in got.stderr


def test_column_option_maps_names(sortition, tmp_path):
    path = write_csv(tmp_path / "theirs.csv", invented_records(), names={"unit": "user_id", "arm": "variant"})
    got = srm(sortition, path, "--column", "unit=user_id", "--column", "arm=variant", "--expect", "left=50,right=50",
              "--format", "json")
    assert got.exit_code in (0, 1)
    assert json.loads(got.stdout)["results"][0]["units"] > 0


def test_strict_counts_malformed_records_as_findings_like_check_counts_warnings(sortition, tmp_path):
    path = balanced_log(tmp_path)
    path.write_text(path.read_text() + "not a record\n")
    assert srm(sortition, path, "--expect", "50,50").exit_code == 0
    got = srm(sortition, path, "--expect", "50,50", "--strict")
    # --strict means the same in check and srm: what is otherwise only reported exits 1 (2 stays "unreadable")
    assert got.exit_code == 1 and f"{path}:2001" in got.stderr
    assert json.loads(srm(sortition, path, "--expect", "50,50", "--strict", "--format", "json").stdout)["srm"] is False


def test_out_writes_the_report_to_a_file(sortition, tmp_path):
    out = tmp_path / "report.json"
    got = srm(sortition, balanced_log(tmp_path), "--expect", "50,50", "--format", "json", "--out", out)
    assert got.exit_code == 0 and got.stdout == ""
    assert json.loads(out.read_text())["results"][0]["experiment"] == "exp-a"


def test_help_shows_an_example(sortition):
    got = sortition("srm", "--help")
    assert got.exit_code == 0 and "Example: sortition srm" in got.stdout
