"""Fuzzing the loader: a mutated config gives a Config or a ConfigError naming a place, never another exception.

Mutations start from the invented example configs and change them the ways
editors and attackers do: a value replaced by a hostile scalar (YAML 1.1
spellings, huge numbers, tags, anchors), lines cut, duplicated or swapped,
characters inserted or deleted. A config that loads must also build an
Assigner that assigns without raising. The CI run is bounded (a few hundred
examples); `make bench` runs the same property longer (tests/bench/bench_fuzz.py).
"""

from __future__ import annotations

from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bucketing import Assigner, Config, ConfigError, MemorySink, load_config

EXAMPLES = Path(__file__).resolve().parents[1] / "configs_example"
SEEDS = sorted(p.read_text(encoding="utf-8") for p in EXAMPLES.glob("*.yaml"))

HOSTILE_SCALARS = [
    "yes", "NO", "on", "Off", "y", "~", "null", "", "0123", "062", "0o17", "0x1F", "0b101", "1_000", "12:30",
    "190:20:30.15", "7.10", "1e3", "1.0e+308", "1.0e+400", "-1.0e+308", ".inf", "-.Inf", ".nan", "1e-300",
    "9" * 400, "0x" + "f" * 300, "!!binary aGVsbG8=", "!!timestamp 2026-11-03", "!!set {a}", "!local x",
    "!!python/name:os.system", "&a", "*a", "*nowhere", "&a [*a]", "{<<: *a}", "<<", "[", "]", "{", "}",
    "'", '"', "|", ">", "- ", "? ", ": ", "#", "%YAML 1.1", "---", "...", "\t", "\u00a0", "٣", "𝟘-𝟡",
    "0-99999", "9999-0", ">=7.", ">=" + "1." * 200 + "1", "2026-02-30", "true", "false", "100", "-50", "50.125",
]


@st.composite
def mutated_config(draw) -> str:
    lines = draw(st.sampled_from(SEEDS)).splitlines()
    for _ in range(draw(st.integers(1, 3))):
        if not lines:
            lines = ["format: 1"]
        # Half the mutations replace one value, so that most configs stay close enough to valid to reach
        # the models, the rules and the Assigner rather than stopping at a YAML syntax error.
        kind = draw(st.sampled_from(["value"] * 6 + ["insert", "delete", "duplicate", "swap", "chars", "indent"]))
        valued = [i for i, line in enumerate(lines) if ": " in line and not line.lstrip().startswith("#")]
        at = draw(st.sampled_from(valued)) if kind == "value" and valued else draw(st.integers(0, len(lines) - 1))
        line = lines[at]
        if kind == "value":
            head, colon, _ = line.partition(": ")
            scalar = draw(st.sampled_from(HOSTILE_SCALARS) | st.text(max_size=12))
            lines[at] = f"{head}: {scalar}" if colon else f"{line} {scalar}"
        elif kind == "insert":
            lines.insert(at, draw(st.sampled_from(HOSTILE_SCALARS)) + draw(st.sampled_from(["", ": x", ":", " # c"])))
        elif kind == "delete":
            del lines[at]
        elif kind == "duplicate":
            lines.insert(at, line)
        elif kind == "swap":
            other = draw(st.integers(0, len(lines) - 1))
            lines[at], lines[other] = lines[other], line
        elif kind == "chars":
            cut = draw(st.integers(0, len(line)))
            lines[at] = line[:cut] + draw(st.text(max_size=4)) + line[cut + draw(st.integers(0, 3)):]
        else:
            lines[at] = " " * draw(st.integers(0, 12)) + line.lstrip()
    return "\n".join(lines) + "\n"


def load_or_refuse(text: str) -> Config | ConfigError:
    """The property: a Config that assigns, or a ConfigError whose every problem names a place."""
    try:
        config = load_config("fuzz.yaml", text=text)
    except ConfigError as exc:
        assert exc.problems
        for problem in exc.problems:
            assert problem.file == "fuzz.yaml" and problem.line >= 1 and problem.column >= 1, problem
            assert problem.rule and problem.message and "\n" not in problem.message, problem
        return exc
    assigner = Assigner(config, sink=MemorySink())
    for unit_type in {layer.unit for layer in config.layers}:
        assigner.assign({unit_type: "L-1"}, {"country": "NL", "app_version": "7.10"}).to_dict()
    return config


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow], derandomize=True)
@given(mutated_config())
def test_a_mutated_config_loads_or_is_refused_with_a_located_error(text):
    load_or_refuse(text)


def test_the_seeds_load_and_some_mutations_are_refused():
    # The property above would hold vacuously if every mutation were refused, or none.
    assert all(isinstance(load_or_refuse(seed), Config) for seed in SEEDS)
    assert isinstance(load_or_refuse(SEEDS[0].replace("format: 1", "format: yes")), ConfigError)
