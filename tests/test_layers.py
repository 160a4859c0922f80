"""The layers of the code, checked on its imports: one direction inside `audit`, no private module across packages.

(`audit` importing only the SDK's public names is tests/test_sdk_surface.py's.)
"""

import ast
from pathlib import Path

from tests.conftest import ROOT

# Within audit, a subpackage may import only those listed (and itself, and the package's own `_errors`).
MAY_IMPORT = {
    "cli": {"render", "checks", "srm", "demo"},
    "render": {"checks", "srm"},
    "demo": set(),
    "checks": set(),
    "srm": set(),
}
COMPUTE = ("checks", "srm")
DUCKDB_ENGINE = {"_sql", "_scan", "_malformed", "_duckdb"}  # audit/srm modules of the DuckDB counting engine
OTHER_ENGINES = {"_spark"}  # engines that read by the DuckDB engine's rules (field names, messages, line finding)
CLI_LIBRARIES = ("typer", "click")
# Tests of the SDK's internals that may import its private modules (each names what it takes and why there).
SDK_INTERNAL_TESTS = {
    ROOT / "tests" / "vectors" / "make_vectors.py",  # salt_uses: the generator lists every salt the rules see
    ROOT / "tests" / "test_explain.py",  # REASONS: every reason code of explain is covered
    ROOT / "tests" / "test_exposure_sinks.py",  # pseudonym: the HMAC written in place of unit ids
    ROOT / "tests" / "test_batch.py",  # _executor_assigner: a Spark worker builds the Assigner of a version once
}


def _imports(path: Path, root: Path = ROOT) -> list[str]:
    """Absolute names of the modules a file imports (relative imports resolved)."""
    package = ".".join(path.relative_to(root).with_suffix("").parts)
    if path.name != "__init__.py":
        package = package.rpartition(".")[0]
    names = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names += [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                parts = package.split(".")
                base = ".".join(parts[:len(parts) - node.level + 1] + ([base] if base else []))
            names += [base] + [f"{base}.{alias.name}" for alias in node.names]
    return names


def _private(name: str, package: str) -> bool:
    parts = name.split(".")
    return parts[0] == package and any(p.startswith("_") and p != "__version__" for p in parts[1:])


def test_the_sdk_never_imports_the_audit():
    assert [n for p in (ROOT / "bucketing").rglob("*.py") for n in _imports(p) if n.split(".")[0] == "audit"] == []


def test_tests_use_the_public_api():
    offenders = [(str(p.relative_to(ROOT)), n) for p in (ROOT / "tests").rglob("*.py") if p not in SDK_INTERNAL_TESTS
                 for n in _imports(p) if _private(n, "audit") or _private(n, "bucketing")]
    assert offenders == []


def test_imports_inside_audit_point_one_way():
    wrong = []
    for layer, allowed in MAY_IMPORT.items():
        for path in (ROOT / "audit" / layer).rglob("*.py"):
            for name in _imports(path):
                parts = name.split(".")
                if parts[0] == "audit" and len(parts) > 1 and parts[1] in MAY_IMPORT:
                    if parts[1] != layer and parts[1] not in allowed:
                        wrong.append((str(path.relative_to(ROOT)), name))
                if layer in COMPUTE and parts[0] in CLI_LIBRARIES:
                    wrong.append((str(path.relative_to(ROOT)), name))
    assert wrong == []


def test_only_the_duckdb_engine_touches_duckdb():
    # Results, statistics, diagnosis and renderers see small tables: they load without any counting engine.
    outside = [(str(path.relative_to(ROOT)), name) for path in (ROOT / "audit").rglob("*.py")
               if not (path.parent.name == "srm" and path.stem in DUCKDB_ENGINE | OTHER_ENGINES)
               for name in _imports(path)
               if name.split(".")[0] == "duckdb" or name.split(".")[:3] in [["audit", "srm", m] for m in DUCKDB_ENGINE]]
    assert outside == []
    engines = [(stem, name) for stem in OTHER_ENGINES for name in _imports(ROOT / "audit" / "srm" / f"{stem}.py")
               if name.split(".")[0] == "duckdb" or name == "audit.srm._duckdb"]
    assert engines == [], "another engine shares the reading rules, never DuckDB itself"


def test_the_checker_sees_a_wrong_import(tmp_path):
    # The rules above must be able to fail: a compute module importing a renderer is caught.
    fake = tmp_path / "audit" / "srm" / "_probe.py"
    fake.parent.mkdir(parents=True)
    fake.write_text("from ..render import srm_text\nfrom .._errors import LogError\nimport typer\n", encoding="utf-8")
    found = _imports(fake, tmp_path)
    assert {"audit.render.srm_text", "audit._errors.LogError", "typer"} <= set(found)
    assert _private("bucketing._model", "bucketing") and not _private("bucketing.testing", "bucketing")
