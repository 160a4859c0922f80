"""The SRM audit as a readable terminal report: mismatches first, then the balanced experiments."""

from __future__ import annotations

from ._srm_model import AuditResult, ExperimentResult

SEGMENT_ROWS = 8


def p_text(value: float) -> str:
    """A p-value as reports show it: two significant digits, and a floor for underflow."""
    return f"{value:.2g}" if value >= 1e-300 else "<1e-300"


def _table(header: list[str], rows: list[list[str]], indent: str = "    ") -> list[str]:
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    aligned = lambda row: indent + "  ".join(  # noqa: E731
        str(c).ljust(w) if i == 0 else str(c).rjust(w) for i, (c, w) in enumerate(zip(row, widths)))
    return [aligned(header), *(aligned(r) for r in rows)]


def _experiment(result: ExperimentResult, threshold: float) -> list[str]:
    mark = "MISMATCH" if result.srm else "balanced"
    lines = [f"{mark}  {result.layer} / {result.experiment}   {result.units:,} units   "
             f"chi2 = {result.chi2:.1f} ({result.df} df)   p = {p_text(result.p_value)}"]
    if not result.srm:
        return lines + [f"    note: {c.message}" for c in result.causes]
    rows = [[a.arm, f"{a.units:,}", f"{a.observed_share:.2%}", f"{a.expected_share:.2%}",
             f"{a.ratio:.3f}", f"{a.excess_units:+,.0f}", f"{a.records:,}", f"{a.records_per_unit:.2f}"]
            for a in result.arms]
    lines += _table(["arm", "units", "observed", "expected", "ratio", "excess", "records", "per unit"], rows)
    if result.first_srm_day:
        lines.append(f"    cumulative test first below {threshold:g} on {result.first_srm_day.isoformat()}")
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


def render_text(result: AuditResult) -> str:
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
    return "\n".join(lines).rstrip() + "\n"
