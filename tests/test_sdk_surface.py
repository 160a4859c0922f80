"""The SDK's public surface: what `audit` (and any user) may import, problem locations, no import cycles."""

import ast
from pathlib import Path

import jsonschema

import bucketing
from bucketing import RULES, ConfigFile, config_schema, parse_config

from .conftest import SMALL

ROOT = Path(__file__).resolve().parents[1]


def _imports(module: Path) -> list[tuple[int, str]]:
    """(relative level, module name) of every import statement in a file."""
    found = []
    for node in ast.walk(ast.parse(module.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            found.append((node.level, node.module or ""))
        elif isinstance(node, ast.Import):
            found.extend((0, alias.name) for alias in node.names)
    return found


def test_audit_imports_only_the_public_sdk():
    private = [f"{path.relative_to(ROOT)}: {name}"
               for path in sorted((ROOT / "audit").rglob("*.py"))
               for level, name in _imports(path)
               if level == 0 and name.startswith("bucketing.") and name.split(".")[1].startswith("_")]
    assert private == []


def test_sdk_modules_import_each_other_without_a_cycle():
    package = ROOT / "bucketing"
    graph = {path.stem: {name.split(".")[0] for level, name in _imports(path) if level == 1 and name}
             for path in package.glob("*.py") if path.stem != "__init__"}
    done: set[str] = set()

    def visit(module: str, stack: tuple[str, ...]) -> None:
        assert module not in stack, " -> ".join(stack + (module,))
        if module in done:
            return
        for imported in graph.get(module, ()):
            visit(imported, stack + (module,))
        done.add(module)

    for module in graph:
        visit(module, ())
    assert "_loader" in graph["_assigner"] and "_loader" not in graph["_rules"]


def test_every_public_name_exists():
    missing = [name for name in bucketing.__all__ if not hasattr(bucketing, name)]
    assert missing == []


def test_problems_carry_their_location_as_a_tuple():
    text = SMALL.replace('buckets: ["5000-9999"]', 'buckets: ["4000-9999"]')
    _, problems = parse_config("small.yaml", text=text)
    overlap = [p for p in problems if p.rule == "traffic-overlap"]
    assert len(overlap) == 1
    assert overlap[0].loc == ("layers", 0, "experiments", 1, "buckets")
    assert overlap[0].path == "layers[0].experiments[1].buckets"


def test_every_finding_of_the_sdk_has_a_registered_rule_id():
    text = SMALL.replace('buckets: ["5000-9999"]', 'buckets: ["4000-9999"]').replace("weight: 50", "weight: 40", 1)
    _, problems = parse_config("small.yaml", text=text)
    assert {p.rule for p in problems} == {"traffic-overlap", "weights-total"}
    assert all(rule in RULES and RULES[rule] for rule in {p.rule for p in problems})


def test_the_schema_comes_from_the_models_and_is_valid_json_schema():
    schema = config_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    assert set(schema["properties"]) == set(ConfigFile.model_fields)
