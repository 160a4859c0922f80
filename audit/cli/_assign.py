"""`sortition assign`: what the SDK gives one unit, or a file of units."""

from __future__ import annotations

import csv
import io
import json
import sys
from enum import Enum
from pathlib import Path
from typing import Iterator, Optional

import typer

from bucketing import Assigner, Assignment, load_config

from ._exit import fail, guarded
from ._options import iso_day, key_value_pairs


class AssignFormat(str, Enum):
    text = "text"
    json = "json"
    csv = "csv"


def _read_units(source: str) -> Iterator[tuple[str, dict[str, str]]]:
    """Units from a file (or '-' for stdin): one id per line, or CSV with a `unit` column and attributes."""
    stream = sys.stdin if source == "-" else open(source, encoding="utf-8-sig", newline="")
    name = "<stdin>" if source == "-" else source
    with stream:
        first = stream.readline()
        header = next(csv.reader([first]), [])
        if len(header) > 1 or header == ["unit"]:
            if "unit" not in header:
                fail(f"{name}:1: a CSV of units needs a 'unit' column; found columns {header}")
            reader = csv.DictReader(stream, fieldnames=header)
            for line_no, row in enumerate(reader, start=2):
                if None in row or any(v is None for v in row.values()):
                    found = sum(v is not None for k, v in row.items() if k is not None) + len(row.get(None) or [])
                    fail(f"{name}:{line_no}: expected {len(header)} columns ({','.join(header)}), found {found}")
                unit = row.pop("unit")
                yield unit, {k: v for k, v in row.items() if v != ""}
        else:
            for line in [first, *stream]:
                unit = line.rstrip("\r\n")
                if unit:
                    yield unit, {}


def _given_units(unit: str | None, units: str | None) -> Iterator[tuple[str, dict[str, str]]]:
    """The unit of --unit, or the units of the --units file, with their attributes."""
    if unit is not None:
        yield unit, {}
    elif units is not None:
        yield from _read_units(units)


def _text(got: Assignment, unit_type: str) -> str:
    unit = got.units.get(unit_type, "?")
    lines = [f"{unit} ({unit_type})  config {got.config_version}  holdout: {'yes' if got.holdout else 'no'}"]
    width = max((len(name) for name in got.layers), default=0)
    for name, la in got.layers.items():
        what = f"{la.experiment} / {la.arm}" + ("  (forced)" if la.forced else "") if la.experiment else "-"
        lines.append(f"  {name:<{width}}  bucket {la.bucket:>4}  {what}")
    if got.params:
        lines.append("  params: " + ", ".join(f"{k}={v}" for k, v in got.params.items()))
    return "\n".join(lines)


def _csv_rows(results: Iterator[Assignment], layer_names: list[str], unit_type: str) -> Iterator[list]:
    yield ["unit", "holdout"] + [f"{n}:{field}" for n in layer_names for field in ("experiment", "arm", "forced")]
    for got in results:
        row: list = [got.units.get(unit_type, ""), str(got.holdout).lower()]
        for name in layer_names:
            la = got.layers.get(name)
            row += [la.experiment or "", la.arm or "", str(la.forced).lower()] if la else ["", "", ""]
        yield row


def register(app: typer.Typer) -> None:
    @app.command(
        "assign",
        epilog="Example: sortition assign configs_example --unit L-1042 --unit-type learner "
        "--attr country=NL --attr app_version=7.4 --format json. "
        "Why a layer gave what it gave: sortition assign configs_example --unit L-1042 --attr country=US --explain",
    )
    def assign(
        config: Path = typer.Argument(..., help="Config file or directory."),
        unit: Optional[str] = typer.Option(None, "--unit", help="The unit id to assign."),
        units: Optional[str] = typer.Option(None, "--units", help="File of unit ids (one per line), or CSV with a 'unit' "
                                            "column and attribute columns; '-' for stdin."),
        unit_type: Optional[str] = typer.Option(None, "--unit-type", help="Unit type of the id; needed when the config has several."),
        attr: list[str] = typer.Option([], "--attr", help="Unit attribute KEY=VALUE, repeatable."),
        day: Optional[str] = typer.Option(None, "--day", help="Assign as of this ISO date (default: today, UTC)."),
        today: Optional[str] = typer.Option(None, "--today", hidden=True, help="Another name of --day."),
        fmt: AssignFormat = typer.Option(AssignFormat.text, "--format", help="text, json (JSON Lines for --units) or csv."),
        explain: bool = typer.Option(False, "--explain", help="Say for each layer which step decided: forced, held out, "
                                     "a bucket in no experiment's range, not running, before start or after end, a failed "
                                     "eligibility rule (attribute, value, rule), or the arm bucket and the arm. Text or json."),
    ) -> None:
        """Assign one unit, or a file of units, and print experiments, arms, buckets and parameters."""

        def run() -> int:
            if (unit is None) == (units is None):
                fail("give exactly one of --unit ID or --units FILE")
            loaded = load_config(config)
            types = sorted({layer.unit for layer in loaded.layers})
            chosen = unit_type
            if chosen is None:
                if len(types) != 1:
                    fail(f"the config has unit types {types}; pick one with --unit-type")
                chosen = types[0]
            elif chosen not in types:
                fail(f"no layer of the config assigns unit type {chosen!r}; its unit types are {types}")
            when = iso_day(day, "--day") or iso_day(today, "--today")
            assigner = Assigner(loaded)
            extra = key_value_pairs(attr, "--attr", "KEY=VALUE such as country=NL")
            if explain:
                if fmt is AssignFormat.csv:
                    fail("--explain prints text or json, not csv")
                for uid, more in _given_units(unit, units):
                    why = assigner.explain({chosen: uid}, {**extra, **more}, day=when)
                    typer.echo(json.dumps(why.to_dict(), ensure_ascii=False) if fmt is AssignFormat.json else why.to_text())
                return 0
            if unit is not None:
                got = assigner.assign({chosen: unit}, extra, day=when)
                if fmt is AssignFormat.json:
                    typer.echo(json.dumps(got.to_dict(), ensure_ascii=False))
                elif fmt is AssignFormat.csv:
                    _write_csv(_csv_rows(iter([got]), list(got.layers), chosen))
                else:
                    typer.echo(_text(got, chosen))
                return 0
            assert units is not None  # exactly one of --unit and --units
            results = (assigner.assign({chosen: uid}, {**extra, **a}, day=when) for uid, a in _read_units(units))
            layer_names = [layer.name for layer in loaded.layers if layer.unit == chosen]
            if fmt is AssignFormat.csv:
                _write_csv(_csv_rows(results, layer_names, chosen))
            else:
                for got in results:
                    out = json.dumps(got.to_dict(), ensure_ascii=False) if fmt is AssignFormat.json else _text(got, chosen)
                    typer.echo(out)
            return 0

        guarded(run)


def _write_csv(rows: Iterator[list]) -> None:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    for row in rows:
        writer.writerow(row)
    sys.stdout.write(buffer.getvalue())
