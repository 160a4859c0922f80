"""The SRM audit as one self-contained HTML file: inline CSS and SVG, nothing fetched, opens offline.

Per experiment: the arms against the design, the diagnosed causes, a chart of
each arm's observed share per segment with its 95 % interval against the
expected share, and the cumulative p-value day by day against the threshold.
"""

from __future__ import annotations

import math
from html import escape

from ..srm import AuditResult, ExperimentResult, share_interval
from ._text import p_text, ratio_text, repeats_line, test_text, verdict_lines

CHART_SEGMENTS = 12

STYLE = """
:root { --ink:#1d2a33; --paper:#fbf8f3; --card:#ffffff; --line:#e4dccd; --muted:#6b7780;
        --ember:#c8553d; --pine:#2f6f62; --gold:#c9962c; --mist:#eef3f1; }
* { box-sizing:border-box; }
body { margin:0; background:var(--paper); color:var(--ink); font:15px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif; }
header { padding:28px 40px 18px; border-bottom:3px solid var(--ink); }
header h1 { margin:0 0 4px; font-size:24px; letter-spacing:.02em; }
header p { margin:0; color:var(--muted); }
main { padding:20px 40px 60px; max-width:1180px; }
.tally { display:flex; gap:12px; margin:14px 0 0; flex-wrap:wrap; }
.tally span { background:var(--card); border:1px solid var(--line); border-radius:14px; padding:4px 12px; font-size:13px; }
.tally .bad { border-color:var(--ember); color:var(--ember); font-weight:600; }
section.exp { background:var(--card); border:1px solid var(--line); border-left:6px solid var(--pine);
              border-radius:6px; margin:22px 0; padding:18px 22px; }
section.exp.srm { border-left-color:var(--ember); }
section.exp h2 { margin:0; font-size:19px; }
section.exp h2 small { font-weight:400; color:var(--muted); }
.verdict { display:inline-block; font-size:12px; font-weight:700; letter-spacing:.08em; padding:2px 8px;
           border-radius:3px; color:#fff; background:var(--pine); margin-right:8px; vertical-align:2px; }
.srm .verdict { background:var(--ember); }
.stats { color:var(--muted); margin:6px 0 12px; }
table { border-collapse:collapse; font-size:13.5px; margin:8px 0 12px; }
th, td { padding:4px 10px; text-align:right; border-bottom:1px solid var(--line); }
th:first-child, td:first-child { text-align:left; }
th { font-weight:600; color:var(--muted); }
td.off { color:var(--ember); font-weight:600; }
.causes { background:var(--mist); border-radius:4px; padding:10px 14px; margin:10px 0; }
.causes h3 { margin:0 0 6px; font-size:14px; }
.causes li { margin:4px 0; }
.charts { display:flex; flex-wrap:wrap; gap:18px; align-items:flex-start; }
figure { margin:0; }
figcaption { font-size:13px; color:var(--muted); margin:4px 0 2px; }
svg text { font:11.5px system-ui,-apple-system,"Segoe UI",sans-serif; fill:var(--ink); }
svg .axis { stroke:#9aa4ab; stroke-width:1; }
svg .grid { stroke:var(--line); stroke-width:1; }
svg .expect { stroke:var(--gold); stroke-width:2; stroke-dasharray:5 4; }
svg .ok { fill:var(--pine); stroke:var(--pine); }
svg .bad { fill:var(--ember); stroke:var(--ember); }
svg .thr { stroke:var(--ember); stroke-width:1.5; stroke-dasharray:3 3; }
svg .curve { fill:none; stroke:var(--ink); stroke-width:2; }
svg .curve.anytime { stroke:var(--gold); stroke-dasharray:2 4; }
svg .onset { stroke:var(--ember); stroke-width:2.5; }
svg .onset-span { fill:var(--ember); opacity:0.12; }
details { margin:6px 0; }
summary { cursor:pointer; color:var(--muted); }
.quiet { color:var(--muted); font-size:13px; }
"""


def _share_chart(result: ExperimentResult, arm_index: int, threshold: float) -> str:
    """One arm's observed share, overall and per segment, with 95 % intervals, against the design."""
    arm = result.arms[arm_index]
    rows = [("all units", arm.observed_share, arm.share_low, arm.share_high, result.srm, result.units)]
    if result.localisation is not None:
        loc = result.localisation
        low, high = share_interval(loc.arm_units[arm_index], loc.units)
        rows.append(("▶ " + loc.label, loc.arm_units[arm_index] / loc.units if loc.units else 0, low, high,
                     loc.p_value < threshold, loc.units))
    localised = dict(result.localisation.by) if result.localisation is not None else None
    for segment in [s for s in result.segments if dict(s.by) != localised][:CHART_SEGMENTS]:
        count = segment.arm_units[arm_index]
        low, high = share_interval(count, segment.units)
        rows.append((segment.label, count / segment.units if segment.units else 0, low, high, segment.srm,
                     segment.units))
    spread = max(max(abs(r[2] - arm.expected_share), abs(r[3] - arm.expected_share)) for r in rows)
    spread = min(max(spread * 1.1, 0.01), 1.0)
    lo, hi = max(0.0, arm.expected_share - spread), min(1.0, arm.expected_share + spread)
    label_w, plot_w, row_h, top = 230, 280, 22, 26
    width, height = label_w + plot_w + 20, top + row_h * len(rows) + 30
    x = lambda v: label_w + (v - lo) / (hi - lo) * plot_w  # noqa: E731
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" role="img" '
             f'aria-label="share of arm {escape(arm.arm)} by segment">']
    for tick in (lo, arm.expected_share, hi):
        parts.append(f'<line class="grid" x1="{x(tick):.1f}" y1="{top - 6}" x2="{x(tick):.1f}" y2="{height - 26}"/>')
        parts.append(f'<text x="{x(tick):.1f}" y="{height - 10}" text-anchor="middle">{tick:.1%}</text>')
    parts.append(f'<line class="expect" x1="{x(arm.expected_share):.1f}" y1="{top - 10}" '
                 f'x2="{x(arm.expected_share):.1f}" y2="{height - 26}"/>')
    parts.append(f'<text x="{x(arm.expected_share):.1f}" y="{top - 14}" text-anchor="middle">design</text>')
    for i, (label, share, low, high, off, units) in enumerate(rows):
        y = top + row_h * i + row_h / 2
        cls = "bad" if off else "ok"
        shown = label if len(label) <= 30 else label[:29] + "…"
        parts.append(f'<text x="{label_w - 8}" y="{y + 4:.1f}" text-anchor="end" class="seg">{escape(shown)}</text>')
        parts.append(f'<g class="{cls}"><title>{escape(label)}: {share:.2%} of {units:,} units '
                     f'(95 % interval {low:.2%} to {high:.2%})</title>'
                     f'<line x1="{x(low):.1f}" y1="{y:.1f}" x2="{x(high):.1f}" y2="{y:.1f}" stroke-width="2"/>'
                     f'<circle cx="{x(share):.1f}" cy="{y:.1f}" r="4.5"/></g>')
    parts.append("</svg>")
    return (f'<figure><figcaption>share of arm <b>{escape(arm.arm)}</b> by segment, 95 % intervals '
            f'(dashed: design, {arm.expected_share:.1%})</figcaption>{"".join(parts)}</figure>')


def _day_chart(result: ExperimentResult, threshold: float) -> str:
    """The cumulative test's p-value by day, as -log10(p), against the threshold: the experiment's, or, for a
    mismatch seen only in a segment, that of the segment where it is localised."""
    where = result.localisation
    segment = result.srm_scope == "segment" and where is not None and bool(where.days)
    days = where.days if segment and where is not None else result.days
    crossing = where.first_srm_day if segment and where is not None else result.first_srm_day
    if not days:
        return ""
    heights = [-math.log10(max(d.cumulative_p, 1e-300)) for d in days]
    anytime = [-math.log10(max(d.sequential_p, 1e-300)) for d in days]
    limit = -math.log10(threshold)
    top_value = max(max(heights), max(anytime), limit) * 1.15
    left, plot_w, plot_h, top = 48, 380, 170, 16
    width, height = left + plot_w + 20, top + plot_h + 44
    step = plot_w / max(len(days) - 1, 1)
    x = lambda i: left + i * step  # noqa: E731
    y = lambda v: top + plot_h - v / top_value * plot_h  # noqa: E731
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" role="img" '
             f'aria-label="cumulative p-value by day">',
             f'<line class="axis" x1="{left}" y1="{top + plot_h}" x2="{left + plot_w}" y2="{top + plot_h}"/>',
             f'<line class="axis" x1="{left}" y1="{top}" x2="{left}" y2="{top + plot_h}"/>']
    for exponent in range(0, int(top_value) + 1, max(1, int(top_value) // 5)):
        parts.append(f'<line class="grid" x1="{left}" y1="{y(exponent):.1f}" x2="{left + plot_w}" y2="{y(exponent):.1f}"/>')
        parts.append(f'<text x="{left - 6}" y="{y(exponent) + 4:.1f}" text-anchor="end">1e-{exponent}</text>'
                     if exponent else f'<text x="{left - 6}" y="{y(0) + 4:.1f}" text-anchor="end">1</text>')
    parts.append(f'<line class="thr" x1="{left}" y1="{y(limit):.1f}" x2="{left + plot_w}" y2="{y(limit):.1f}"/>')
    broke = result.break_estimate() if result.srm else None
    if broke is not None:
        onset_day, (low, high), label = broke
        index = {d.day: i for i, d in enumerate(days)}
        if onset_day in index:
            # the days the onset interval spans (days without new units have no point; the nearest ones stand in)
            span_from = min((i for d, i in index.items() if d >= low), default=index[onset_day])
            span_to = max((i for d, i in index.items() if d <= high), default=index[onset_day])
            place = f" in {escape(label)}" if label is not None else ""
            parts.append(f'<rect class="onset-span" x="{x(span_from) - step / 2:.1f}" y="{top}" '
                         f'width="{(span_to - span_from + 1) * step:.1f}" height="{plot_h}"/>')
            parts.append(f'<line class="onset" x1="{x(index[onset_day]):.1f}" y1="{top}" '
                         f'x2="{x(index[onset_day]):.1f}" y2="{top + plot_h}"><title>broke{place} on '
                         f'{onset_day.isoformat()} (likely between {low.isoformat()} and {high.isoformat()})'
                         f'</title></line>')
    parts.append(f'<text x="{left + plot_w}" y="{y(limit) - 5:.1f}" text-anchor="end">threshold {threshold:g}</text>')
    anytime_points = " ".join(f"{x(i):.1f},{y(h):.1f}" for i, h in enumerate(anytime))
    parts.append(f'<polyline class="curve anytime" points="{anytime_points}"><title>anytime-valid p-value, '
                 f'safe to read every day: {p_text(days[-1].sequential_p)} on the last day</title></polyline>')
    points = " ".join(f"{x(i):.1f},{y(h):.1f}" for i, h in enumerate(heights))
    parts.append(f'<polyline class="curve" points="{points}"/>')
    for i, (day, h) in enumerate(zip(days, heights)):
        cls = "bad" if day.cumulative_p < threshold else "ok"
        parts.append(f'<circle class="{cls} day" cx="{x(i):.1f}" cy="{y(h):.1f}" r="3.5">'
                     f'<title>{day.day.isoformat()}: cumulative p = {p_text(day.cumulative_p)}, '
                     f'{sum(day.arm_units):,} new units</title></circle>')
        if i % max(1, math.ceil(len(days) / 7)) == 0:
            parts.append(f'<text x="{x(i):.1f}" y="{top + plot_h + 16}" text-anchor="middle">'
                         f'{day.day.strftime("%m-%d")}</text>')
    parts.append("</svg>")
    anytime_crossing = next((d.day for d in days if d.sequential_p < threshold), None)
    first = (f" in <b>{escape(where.label)}</b>, where the mismatch is" if segment and where is not None else "")
    first += (f"; solid bar: broke{f' in {escape(broke[2])}' if broke[2] is not None else ''} on "
              f"<b>{broke[0].isoformat()}</b> (shaded: likely days)" if broke is not None else "")
    first += (f"; first below the threshold on <b>{crossing.isoformat()}</b>" if crossing else "")
    first += ("; dotted: the anytime-valid test, safe to read daily"
              + (f", below the threshold on <b>{anytime_crossing.isoformat()}</b>" if anytime_crossing else ""))
    return f'<figure><figcaption>cumulative p-value by day (log scale){first}</figcaption>{"".join(parts)}</figure>'


def _arms_table(result: ExperimentResult) -> str:
    rows = []
    for a in result.arms:
        off = ' class="off"' if result.srm and a.excess_units < 0 else ""
        rows.append(f"<tr><td>{escape(a.arm)}</td><td>{a.units:,}</td><td>{a.observed_share:.2%}</td>"
                    f"<td>{a.expected_share:.2%}</td><td>{ratio_text(a.ratio)}</td><td{off}>{a.excess_units:+,.0f}</td>"
                    f"<td>{a.records:,}</td><td>{a.records_per_unit:.2f}</td><td>{a.duplicate_records:,}</td></tr>")
    return ("<table><tr><th>arm</th><th>units</th><th>observed</th><th>design</th><th>ratio</th>"
            "<th>units over (+) or short (−)</th><th>records</th><th>per unit</th><th>repeated records</th></tr>"
            + "".join(rows) + "</table>")


def _segments_table(result: ExperimentResult) -> str:
    if not result.segments:
        return ""
    rows = []
    for s in result.segments:
        flagged = ' class="off"' if s.srm else ""
        replay = "" if s.replay_mismatch_share is None else f"{s.replay_mismatch_share:.1%}"
        rows.append(f"<tr><td>{escape(s.label)}</td><td>{s.units:,}</td><td>{p_text(s.p_value)}</td>"
                    f"<td{flagged}>{p_text(s.p_adjusted)}</td><td>{max(s.explained, 0):.0%}</td>"
                    f"<td>{p_text(s.p_without)}</td><td>{replay}</td></tr>")
    return (f"<details><summary>all {len(result.segments)} segments tested (Holm-adjusted)</summary>"
            "<table><tr><th>segment</th><th>units</th><th>p</th><th>p adjusted</th><th>share of imbalance</th>"
            "<th>p without it</th><th>arm replay off</th></tr>" + "".join(rows) + "</table></details>")


def _experiment(result: ExperimentResult, threshold: float) -> str:
    verdict = ("MISMATCH IN A SEGMENT" if result.srm_scope == "segment" else "MISMATCH") if result.srm else "BALANCED"
    facts = [f"{result.units:,} units", f"χ² = {result.chi2:.1f} ({result.df} df)",
             f"p = {p_text(result.p_value)} ({test_text(result.test, result.mc_error)})"]
    if result.replay_checked:
        facts.append(f"arm replay: {result.replay_mismatch_share:.2%} of {result.replay_checked:,} units differ")
    if result.multi_arm_units:
        facts.append(f"{result.multi_arm_units:,} units in two arms (left out)")
    if result.moved_with_version_units:
        facts.append(f"{result.moved_with_version_units:,} units changed arm with the config version "
                     f"(counted at first exposure)")
    repeats = repeats_line(result)
    if repeats:
        facts.append(repeats)
    said = "".join(f"<p>{escape(line[0].upper() + line[1:])}.</p>" for line in verdict_lines(result, threshold))
    causes = ""
    if result.causes:
        causes = ('<div class="causes"><h3>What the logs say</h3><ul>'
                  + "".join(f"<li>{escape(c.message)}</li>" for c in result.causes) + "</ul></div>")
    loc = ""
    if result.localisation is not None:
        lz = result.localisation
        loc = (f'<p>Localised to <b>{escape(lz.label)}</b>: {lz.units:,} units, p = {p_text(lz.p_value)}; '
               f'everything else p = {p_text(lz.p_rest)}.</p>')
    charts = "".join(_share_chart(result, i, threshold) for i in range(len(result.arms) if len(result.arms) > 2 else 1))
    return (f'<section class="exp{" srm" if result.srm else ""}" id="{escape(result.experiment)}">'
            f'<h2><span class="verdict">{verdict}</span>{escape(result.experiment)} '
            f'<small>in layer {escape(result.layer)}</small></h2>'
            f'<p class="stats">{" · ".join(escape(f) for f in facts)}</p>'
            f'{said}{causes}{loc}{_arms_table(result)}'
            f'<div class="charts">{charts}{_day_chart(result, threshold)}</div>'
            f'{_segments_table(result)}</section>')


def _data_problems(result: AuditResult) -> str:
    parts = []
    if result.malformed.total:
        rows = "".join(f"<tr><td>{escape(e.file)}{f':{e.line}' if e.line else ''}</td><td>{escape(e.kind)}</td>"
                       f"<td>{escape(e.detail)}</td></tr>" for e in result.malformed.examples)
        counts = ", ".join(f"{escape(k.replace('_', ' '))}: {n:,}" for k, n in sorted(result.malformed.counts.items()))
        parts.append(f"<h2>Malformed records ({result.malformed.total:,}, left out)</h2><p class='quiet'>{counts}</p>"
                     f"<table><tr><th>where</th><th>kind</th><th>what</th></tr>{rows}</table>")
    if result.unknown:
        rows = "".join(f"<tr><td>{escape(u.experiment)}{' / ' + escape(u.arm) if u.arm else ''}</td>"
                       f"<td>{escape(u.reason.replace('_', ' '))}</td><td>{u.records:,}</td></tr>" for u in result.unknown)
        parts.append(f"<h2>Records the design does not know (left out)</h2>"
                     f"<table><tr><th>experiment / arm</th><th>why</th><th>records</th></tr>{rows}</table>")
    return "".join(parts)


def srm_html(result: AuditResult) -> str:
    mismatches = sum(r.srm for r in result.results)
    tally = [f"<span>{len(result.files)} file(s)</span>", f"<span>{result.records:,} records</span>",
             f"<span>{len(result.results)} experiment(s)</span>",
             f'<span class="{"bad" if mismatches else ""}">{mismatches} mismatch(es)</span>',
             f"<span>threshold p &lt; {result.threshold:g}</span>"]
    if result.malformed.total:
        tally.append(f"<span>{result.malformed.total:,} malformed</span>")
    body = "".join(_experiment(r, result.threshold) for r in result.results)
    notes = "".join(f'<p class="quiet">{escape(n)}</p>' for n in result.notes)
    return ("<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>sortition · split audit</title><style>{STYLE}</style></head><body>"
            "<header><h1>Split audit of exposure logs</h1>"
            "<p>Does each experiment's split of units match its design? Where not: which segment, since which day, why.</p>"
            f'<div class="tally">{"".join(tally)}</div></header>'
            f"<main>{body}{_data_problems(result)}{notes}"
            "<p class=\"quiet\">Each split is tested on distinct units at their first exposure: exactly below "
            "1,000 expected units per arm, by Pearson's chi-square above (the JSON's <code>test</code> says which). "
            "Units seen in two arms and forced units are left out. Segment p-values are Holm-adjusted.</p>"
            "</main></body></html>\n")
