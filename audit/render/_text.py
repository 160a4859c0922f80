"""Text for the terminal: the SRM audit (mismatches first), check findings, diff impact, the bucket layout.

Strings in these texts come from configs, file names and logs, which anyone
can write; `terminal_safe` shows their control characters as escapes, so
that none can move the cursor, retitle the window or clear the screen.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Iterator

from bucketing import BUCKETS, Problem

from ..checks import (RULES, CheckResult, ConfigDiff, ExperimentChange, LayerLayout, Layout, RolloutShare, percent_text,
                      range_text)

if TYPE_CHECKING:  # `audit.srm` loads SciPy: the config commands start without it
    from ..srm import AuditResult, ExperimentResult

SEGMENT_ROWS = 8


def _escaped(char: str) -> str:
    code = ord(char)
    return f"\\x{code:02x}" if code <= 0xFF else f"\\u{code:04x}" if code <= 0xFFFF else f"\\U{code:08x}"


def terminal_safe(text: str) -> str:
    """`text` with every character that is not printable (but the line breaks) written as an escape such as \\x1b."""
    if text.isprintable():
        return text
    return "\n".join("".join(c if c.isprintable() else _escaped(c) for c in line) for line in text.split("\n"))


def p_text(value: float) -> str:
    """A p-value as reports show it: two significant digits, and a floor for underflow."""
    return f"{value:.2g}" if value >= 1e-300 else "<1e-300"


def test_text(test: str, mc_error: float | None) -> str:
    """Which test gave a p-value; a Monte Carlo one states how far its 99 % upper bound lies above it."""
    return f"{test}, 99 % bound +{mc_error:.2g}" if mc_error is not None else test


def ratio_text(value: float) -> str:
    """Observed over expected units; an arm the design closes has no ratio."""
    return "—" if math.isnan(value) else f"{value:.3f}"


def _table(header: list[str], rows: list[list[str]], indent: str = "    ") -> list[str]:
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    aligned = lambda row: indent + "  ".join(  # noqa: E731
        str(c).ljust(w) if i == 0 else str(c).rjust(w) for i, (c, w) in enumerate(zip(row, widths)))
    return [aligned(header), *(aligned(r) for r in rows)]


def verdict_lines(result: ExperimentResult, threshold: float) -> list[str]:
    """What the verdict rests on, where the split broke and since when: the same sentences in text and HTML."""
    if not result.srm:
        return []
    if result.srm_scope == "segment":
        worst = min((s for s in result.segments if s.srm), key=lambda s: s.p_adjusted)
        tested = f"anytime-valid p = {p_text(worst.sequential_p_value)}" if worst.sequential_p_value is not None \
            else f"p = {p_text(worst.p_value)} ({test_text(worst.test, worst.mc_error)})"
        lines = [f"the overall split looks fine (p = {p_text(result.p_value)}), but segment {worst.label} does not: "
                 f"{tested}, {p_text(worst.p_adjusted)} after Holm over {len(result.segments)} segments"]
    elif result.closed_arm_units:
        closed = ", ".join(repr(a.arm) for a in result.arms if a.units and a.expected_share == 0)
        lines = [f"{result.closed_arm_units:,} units are in {closed}, closed by the design (weight 0): "
                 f"impossible under it, whatever the open arms show (p = 0)"]
    elif result.verdict == "anytime":
        lines = [f"the overall split is off on the anytime-valid test: p = {p_text(result.sequential_p_value)} "
                 f"< {threshold:g}"]
    else:
        lines = [f"the overall split is off: p = {p_text(result.p_value)} ({test_text(result.test, result.mc_error)}) "
                 f"< {threshold:g}"]
    where = result.localisation
    broke = result.break_estimate()
    if broke is not None:
        onset_day, interval, label = broke
        scope = f" in {label}" if label is not None else ""
        span = f" (likely between {interval[0].isoformat()} and {interval[1].isoformat()})" \
            if interval[0] != interval[1] else ""
        lines.append(f"broke{scope} on {onset_day.isoformat()}{span}: the most likely day the arm shares changed")
    crossing = where.first_srm_day if where is not None and where.first_srm_day else result.first_srm_day
    if crossing is not None:
        lines.append(f"the cumulative test first crossed {threshold:g} on {crossing.isoformat()} "
                     f"(the day the evidence sufficed, not the day it broke)")
    return lines


def repeats_line(result: ExperimentResult) -> str | None:
    """Exact repeats per arm (records logged twice with the same unit, arm and time), when there are any."""
    if not result.duplicate_records:
        return None
    parts = [f"{a.arm!r} {a.duplicate_records:,} ({a.duplicate_records / a.records:.1%} of its records)"
             for a in result.arms if a.duplicate_records]
    return "exact repeats: " + ", ".join(parts)


def moved_line(result: ExperimentResult) -> str | None:
    """Units whose arm changed with the config version (a ramp moving them): counted once, not as in two arms."""
    if not result.moved_with_version_units:
        return None
    return (f"{result.moved_with_version_units:,} units changed arm with the config version (a ramp moved them): "
            f"counted at their first exposure")


def _experiment(result: ExperimentResult, threshold: float) -> list[str]:
    mark = "MISMATCH" if result.srm else "balanced"
    lines = [f"{mark}  {result.layer} / {result.experiment}   {result.units:,} units   "
             f"chi2 = {result.chi2:.1f} ({result.df} df)   p = {p_text(result.p_value)} "
             f"({test_text(result.test, result.mc_error)})"]
    repeats = repeats_line(result)
    facts = [f"    {line}" for line in (repeats, moved_line(result)) if line]
    if not result.srm:
        return lines + facts + [f"    note: {c.message}" for c in result.causes]
    lines += [f"    {line}" for line in verdict_lines(result, threshold)]
    rows = [[a.arm, f"{a.units:,}", f"{a.observed_share:.2%}", f"{a.expected_share:.2%}",
             ratio_text(a.ratio), f"{a.excess_units:+,.0f}", f"{a.records:,}", f"{a.records_per_unit:.2f}"]
            for a in result.arms]
    lines += _table(["arm", "units", "observed", "expected", "ratio", "excess", "records", "per unit"], rows)
    lines += facts
    if result.days:
        since = (f", first below {threshold:g} on {result.first_sequential_srm_day.isoformat()}"
                 if result.first_sequential_srm_day else f", not below {threshold:g}")
        lines.append(f"    anytime-valid test (safe to read daily): p = {p_text(result.sequential_p_value)}{since}")
    if result.segments:
        lines.append("    segments, worst first (p adjusted by Holm over all segments tested):")
        seg_rows = [[s.label, f"{s.units:,}", p_text(s.p_value), p_text(s.p_adjusted), "yes" if s.srm else "",
                     f"{max(s.explained, 0):.0%}", p_text(s.p_without),
                     "" if s.replay_mismatch_share is None else f"{s.replay_mismatch_share:.1%}"]
                    for s in result.segments[:SEGMENT_ROWS]]
        lines += _table(["segment", "units", "p", "p adj", "SRM", "explains", "p without", "arm replay off"],
                        seg_rows, "      ")
        if len(result.segments) > SEGMENT_ROWS:
            lines.append(f"      ... {len(result.segments) - SEGMENT_ROWS} more segments (see --format json)")
    if result.without_worst is not None:
        w = result.without_worst
        verdict = "the mismatch remains" if w.srm else "the mismatch disappears"
        lines.append(f"    without {w.label}: p = {p_text(w.p_value)}, {verdict}")
    if result.localisation is not None:
        loc = result.localisation
        lines.append(f"    localised to {loc.label}: {loc.units:,} units, p = {p_text(loc.p_value)}; "
                     f"everything else p = {p_text(loc.p_rest)}")
    if result.replay_checked:
        lines.append(f"    replay: {result.replay_checked:,} units recomputed from the config, "
                     f"{result.replay_mismatch_share:.2%} logged in another arm")
    if result.causes:
        lines.append("    why:")
        lines += [f"      - {c.message}" for c in result.causes]
    return lines


def srm_text(result: AuditResult) -> str:
    srm_count = sum(r.srm for r in result.results)
    lines = [f"sortition srm: {len(result.files)} file(s), {result.records:,} records, "
             f"{len(result.results)} experiment(s), threshold p < {result.threshold:g}; "
             f"{srm_count} with a sample ratio mismatch", ""]
    for experiment in result.results:
        lines += _experiment(experiment, result.threshold)
        lines.append("")
    if result.unknown:
        lines.append("records the design does not know (left out):")
        for u in result.unknown:
            what = f"{u.experiment} / {u.arm}" if u.arm else u.experiment
            lines.append(f"    {u.records:,}  {u.reason.replace('_', ' ')}: {what}")
        lines.append("")
    malformed = result.malformed
    if malformed.total:
        kinds = ", ".join(f"{k.replace('_', ' ')} {n:,}" for k, n in sorted(malformed.counts.items()))
        lines.append(f"malformed records (left out): {malformed.total:,} ({kinds})")
        for e in malformed.examples:
            where = f"{e.file}:{e.line}" if e.line else e.file
            lines.append(f"    {where}: {e.kind.replace('_', ' ')}: {e.detail}")
        lines.append("")
    lines += [f"note: {n}" for n in result.notes]
    return terminal_safe("\n".join(lines).rstrip()) + "\n"


def finding_line(finding: Problem) -> str:
    field_path = f" ({finding.path})" if finding.path else ""
    return terminal_safe(f"{finding.file}:{finding.line}:{finding.column}: {finding.severity} {finding.rule}"
                         f"{field_path}: {finding.message}")


def check_text(result: CheckResult) -> str:
    lines = [finding_line(f) for f in result.findings]
    summary = f"{result.errors} error(s), {result.warnings} warning(s) in {len(result.files)} file(s)"
    if result.waived:
        summary += f"; {len(result.waived)} waived"
    lines.append(summary)
    return terminal_safe("\n".join(lines))


def rules_text() -> str:
    """The rules `check` applies: the SDK's errors and the linter's warnings, and which can be turned off."""
    shown = [rule for rule in RULES.values() if rule.origin in ("sdk", "lint")]
    width = max(len(rule.id) for rule in shown)
    lines = [f"{'rule':<{width}}  {'can be off':<10}  meaning"]
    for rule in shown:
        lines.append(f"{rule.id:<{width}}  {'yes' if rule.can_be_off else 'no':<10}  {rule.meaning}")
    return "\n".join(lines)


VERDICT_MARKS = {"blocked": "BLOCKED", "accepted": "accepted", "ramp": "ramp", "warn": "check", "ok": ""}
APPROVAL_NOTES = {"new": "added by this change", "changed": "changed by this change",
                  "stale": "STALE: carried over unchanged, approves nothing"}


def rollout_text(share: RolloutShare) -> str:
    """"'new-engine' at 20.00 % of the experiment, 19.60 % of learner units"."""
    return (f"{share.arm!r} at {percent_text(share.of_experiment)} of the experiment, "
            f"{percent_text(share.of_units)} of {share.unit} units")


def _rollout_row(c: ExperimentChange) -> str | None:
    before, after = c.rollout_before, c.rollout_after
    if after is None:
        return None
    if before is None or before == after:
        return f"rollout: {rollout_text(after)}"
    return (f"rollout of {after.arm!r}: {percent_text(before.of_experiment)} → {percent_text(after.of_experiment)} "
            f"of the experiment, {percent_text(before.of_units)} → {percent_text(after.of_units)} of {after.unit} units")


def _diff_rows(changes: tuple[ExperimentChange, ...]) -> Iterator[str]:
    pad = f"{'':<8}   "
    for c in changes:
        name = f"{c.layer}/{c.experiment}"
        status = c.status if c.old_status in (None, c.status) else f"{c.old_status}→{c.status}"
        mark = VERDICT_MARKS[c.verdict]
        rollout = _rollout_row(c)
        if c.presence == "added":
            yield f"{mark:<8} {name}  {status}  new, takes {percent_text(c.new_traffic)} of {c.status} traffic"
            yield from ([pad + rollout] if rollout else [])
            continue
        if c.presence == "removed":
            yield f"{mark:<8} {name}  {status}  removed: all its units leave"
            continue
        if not c.changed and not (c.approval and not c.approval.fresh):
            continue
        entered = "-" if c.entered is None else "+" + percent_text(c.entered)
        yield (f"{mark:<8} {name}  {status}  kept {percent_text(c.kept)}  switched {percent_text(c.switched)}  "
               f"left {percent_text(c.left)}  entered {entered}")
        basis = "exact bucket counts" if c.exact else "expected shares: a salt changed, so old and new buckets are independent hashes"
        yield f"{pad}cause: {'; '.join(c.causes) or '-'}  [{basis}]"
        if c.unknown:
            yield f"{pad}share unknown: {', '.join(c.unknown)} (depends on unit attributes and days)"
        for a, b, share in c.moves:
            yield f"{pad}{a} → {b}: {percent_text(share)}"
        if rollout:
            yield pad + rollout
        if c.approval:
            limit = "" if c.approval.moves_up_to is None else f", moves up to {percent_text(c.approval.moves_up_to)}"
            yield f"{pad}reassign_ok ({APPROVAL_NOTES[c.approval.state]}{limit}): {c.approval.why}"
        for place in c.changed_lines:
            yield f"{pad}changed {place.file}:{place.line}: {place.what}"


def diff_text(diff: ConfigDiff) -> str:
    unchanged = sum(1 for c in diff.changes if not c.changed)
    lines = list(_diff_rows(diff.changes))
    lines.append(f"{len(diff.changes)} experiment(s): {unchanged} unchanged, {diff.blocked} blocked")
    lines += [finding_line(f) for f in diff.findings if f.severity in ("error", "warning")]
    return terminal_safe("\n".join(lines))


def _bucket_percent(buckets: int) -> str:
    return f"{buckets / 100:.2f} %"


FREE_MARK = "."
CLASH_MARK = "!"


def bar(layout: LayerLayout, width: int) -> str:
    """One character per BUCKETS/width buckets: the owner of most of them, '.' when mostly free, '!' on a clash."""
    holders: list[list[str]] = [[] for _ in range(BUCKETS)]
    for owner in layout.owners:
        for low, high in owner.ranges:
            for bucket in range(low, high + 1):
                holders[bucket].append(owner.mark)
    cells = []
    for cell in range(width):
        span = holders[cell * BUCKETS // width:(cell + 1) * BUCKETS // width]
        if any(len(h) > 1 for h in span):
            cells.append(CLASH_MARK)
            continue
        tally: dict[str, int] = {}
        for h in span:
            mark = h[0] if h else FREE_MARK
            tally[mark] = tally.get(mark, 0) + 1
        cells.append(max(tally, key=lambda m: (tally[m], m != FREE_MARK)))
    return "".join(cells)


def layout_text(result: Layout, width: int = 100, top: int = 3) -> str:
    lines = []
    want = result.want
    for layout in result.layers:
        used = BUCKETS - layout.free_buckets
        lines.append(f"{layout.name}  (unit {layout.unit})  used {_bucket_percent(used)}, free {_bucket_percent(layout.free_buckets)}")
        lines.append(f"  0 |{bar(layout, width)}| 9999")
        for owner in layout.owners:
            ranges = ", ".join(range_text(r) for r in owner.ranges)
            lines.append(f"  {owner.mark}  {owner.experiment:<24} {owner.status:<8} {_bucket_percent(owner.buckets):>8}  {ranges}")
            if owner.rollout is not None:
                lines.append(f"     rollout: {rollout_text(owner.rollout)}")
        widest = layout.largest_free(top)
        if widest:
            lines.append("  widest free: " + ", ".join(f"{range_text(r)} ({_bucket_percent(r[1] - r[0] + 1)})" for r in widest))
        else:
            lines.append("  no free buckets")
        if want is not None:
            picked = result.proposals.get(layout.name)
            if picked:
                quoted = ", ".join(f'"{range_text(r)}"' for r in picked)
                lines.append(f"  for {_bucket_percent(want)}: buckets: [{quoted}]")
            else:
                lines.append(f"  for {_bucket_percent(want)}: not enough free buckets; set finished experiments "
                             "to done and remove them to free theirs")
        lines.append("")
    return terminal_safe("\n".join(lines).rstrip("\n"))
