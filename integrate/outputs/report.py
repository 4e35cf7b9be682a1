"""The HTML run report: one self-contained file (inline CSS and SVG charts, no scripts, no downloads)."""

from __future__ import annotations

import html
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..compare import GRADE_NAMES
from .tables import write_text_atomic

if TYPE_CHECKING:
    from ..pipeline import RunResult
    from ..workspace import Workspace

CAUTIONS = [
    "Merged records are suggestions, not facts. Review merges, above all the possible links and large "
    "clusters, before acting on them: a wrong merge can harm the people concerned.",
    "These files hold personal data. Keep them where only people who need them can read them, share "
    "the smallest extract that does the job, and delete copies you no longer need.",
    "Follow your local privacy law and your organisation's data-protection policies when you merge, "
    "keep or share these records.",
]

_CSS = """
body{font-family:system-ui,sans-serif;max-width:70rem;margin:1.5rem auto;padding:0 1rem;color:#1b1b1b;
line-height:1.45}h1{font-size:1.6rem}h2{font-size:1.25rem;margin-top:2rem;border-bottom:2px solid #3a5a40}
table{border-collapse:collapse;margin:.5rem 0}td,th{border:1px solid #999;padding:.2rem .5rem;text-align:left}
th{background:#e8efe6}td.n{text-align:right;font-variant-numeric:tabular-nums}
.caution{background:#fff4d6;border:2px solid #8a6d00;padding:.6rem 1rem}.warn{color:#8a2a00}
figure{margin:.5rem 0}figcaption{font-size:.9rem;color:#333}code{background:#f1f1f1;padding:0 .2rem}
"""


def _e(value: object) -> str:
    return html.escape(str(value))


def _table(frame: pd.DataFrame, numeric: tuple[str, ...] = ()) -> str:
    head = "".join(f"<th>{_e(c)}</th>" for c in frame.columns)
    rows = []
    for row in frame.itertuples(index=False):
        cells = []
        for column, value in zip(frame.columns, row):
            cls = ' class="n"' if column in numeric else ""
            cells.append(f"<td{cls}>{_e(value)}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table>"


def bar_chart(labels: list[str], values: list[float], title: str, *, width: int = 640,
              log_scale: bool = False) -> str:
    """A horizontal-axis bar chart as inline SVG (labels under the bars)."""
    height, pad, base = 220, 40, 180
    n = max(len(values), 1)
    bar_w = (width - 2 * pad) / n
    shown = [np.log10(v + 1) if log_scale else v for v in values]
    top = max(shown) if shown and max(shown) > 0 else 1.0
    parts = [f'<svg role="img" aria-label="{_e(title)}" width="{width}" height="{height + 30}" '
             f'viewBox="0 0 {width} {height + 30}" xmlns="http://www.w3.org/2000/svg">',
             f'<title>{_e(title)}</title>',
             f'<line x1="{pad}" y1="{base}" x2="{width - pad}" y2="{base}" stroke="#333"/>']
    step = max(1, n // 12)
    for k, (label, value, s) in enumerate(zip(labels, values, shown)):
        h = (base - 20) * s / top
        x = pad + k * bar_w
        parts.append(f'<rect x="{x + 1:.1f}" y="{base - h:.1f}" width="{max(bar_w - 2, 1):.1f}" '
                     f'height="{h:.1f}" fill="#3a5a40"><title>{_e(label)}: {_e(value)}</title></rect>')
        if k % step == 0:
            parts.append(f'<text x="{x + bar_w / 2:.1f}" y="{base + 14}" font-size="10" '
                         f'text-anchor="middle">{_e(label)}</text>')
    parts.append(f'<text x="{pad}" y="14" font-size="11">max {max(values) if values else 0:g}'
                 f'{" (log scale)" if log_scale else ""}</text></svg>')
    return "".join(parts)


def _histogram(values: np.ndarray, bins: int = 30) -> tuple[list[str], list[float]]:
    if len(values) == 0:
        return [], []
    counts, edges = np.histogram(values, bins=bins)
    return [f"{e:.0f}" for e in edges[:-1]], counts.astype(float).tolist()


def render_report(result: RunResult, ws: Workspace | None = None) -> str:
    s: list[str] = []
    add = s.append
    entities = result.merged.shape[0]
    records = int(sum(result.source_counts.values()))
    add(f"<!doctype html><html lang='en'><head><meta charset='utf-8'><title>Run report {_e(result.started)}"
        f"</title><style>{_CSS}</style></head><body>")
    add(f"<h1>Run report</h1><p>Run started {_e(result.started.isoformat())}; {records} records from "
        f"{len(result.source_counts)} sources became {entities} entities.</p>")
    add("<div class='caution' role='note'><strong>Before you use these results</strong><ul>"
        + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul></div>")
    if result.warnings:
        add("<h2>Warnings</h2><ul>" + "".join(f"<li class='warn'>{_e(w)}</li>" for w in result.warnings) + "</ul>")

    add("<h2>Sources</h2>")
    counts = pd.DataFrame({"source": list(result.source_counts), "records": list(result.source_counts.values())})
    per_source_entities = result.crosswalk.groupby("source")["entity_id"].nunique()
    counts["entities"] = counts["source"].map(per_source_entities).fillna(0).astype(int)
    add(_table(counts, ("records", "entities")))
    if not result.failures.empty:
        summary = result.failures.groupby(["source", "column", "reason"]).size().reset_index(name="rows")
        add("<h3>Values that could not be read (left empty)</h3>" + _table(summary, ("rows",)))
        add("<p>The full list with row numbers is in <code>failures.csv</code>.</p>")

    b = result.blocking
    add("<h2>Blocking</h2>")
    add(f"<p>{b.candidate_pairs} candidate pairs out of {b.all_pairs} possible pairs "
        f"(reduction ratio {b.reduction_ratio:.6f}).</p>")
    rules = pd.DataFrame({"rule": b.rules, "pairs": [b.pairs_per_rule[r] for r in b.rules],
                          "found by this rule only": [b.unique_per_rule[r] for r in b.rules]})
    add(_table(rules, ("pairs", "found by this rule only")))
    if b.skipped_blocks:
        add("<p class='warn'>Blocks skipped because they were too large: "
            + "; ".join(f"{_e(r)} = '{_e(k)}' ({n} records)" for r, k, n in b.skipped_blocks[:20]) + "</p>")

    add("<h2>Scores</h2>")
    decisions = result.pairs["decision"].value_counts()
    add(_table(decisions.rename_axis("decision").reset_index(name="pairs"), ("pairs",)))
    labels, values = _histogram(result.pairs["weight"].to_numpy())
    add("<figure>" + bar_chart(labels, values, "Candidate pairs by total weight (bits)", log_scale=True)
        + "<figcaption>Candidate pairs by total weight in bits (log scale): matches gather on the right, "
          "non-matches on the left; the valley between them is where review matters.</figcaption></figure>")
    model = result.model
    add(f"<p>Fellegi–Sunter model estimated by EM in {model.iterations} iterations "
        f"({'converged' if model.converged else 'not converged'}); share of matches among candidate pairs "
        f"λ = {model.prior:.4f}.</p>")
    rows = []
    for fm in model.fields.values():
        for level, (m, u, ur, w) in enumerate(zip(fm.m, fm.u, fm.u_random, fm.weights)):
            rows.append({"field": fm.name, "grade": GRADE_NAMES[fm.type][level], "m": f"{m:.4f}",
                         "u (candidates)": f"{u:.4f}", "u (random pairs)": f"{ur:.5f}", "weight (bits)": f"{w:+.2f}"})
    add("<details><summary>m- and u-probabilities and weights per field and grade</summary>"
        + _table(pd.DataFrame(rows), ("m", "u (candidates)", "u (random pairs)", "weight (bits)")) + "</details>")

    add("<h2>Entities</h2>")
    sizes = result.crosswalk.groupby("entity_id").size().value_counts().sort_index()
    add("<figure>" + bar_chart([str(k) for k in sizes.index], sizes.astype(float).tolist(),
                               "Entities by number of records", log_scale=True)
        + "<figcaption>Entities by number of records (log scale). Large clusters deserve a look.</figcaption></figure>")
    conflicts = result.provenance.groupby("field")["conflict"].sum().astype(int)
    conflict_table = conflicts.rename_axis("field").reset_index(name="entities with conflicting values")
    add("<h3>Conflicts per field</h3>" + _table(conflict_table, ("entities with conflicting values",)))

    add("<h2>Mapping files used</h2>")
    hashes = pd.DataFrame({"file": list(result.mapping_hashes), "sha256": list(result.mapping_hashes.values())})
    add(_table(hashes))
    if ws is not None:
        fields = pd.DataFrame([{"field": n, "type": f.type, "meaning": f.meaning, "resolution rule": f.resolve}
                               for n, f in ws.canonical.fields.items()])
        add("<h3>Canonical fields</h3>" + _table(fields))
    timing = pd.DataFrame({"stage": list(result.timings), "seconds": [f"{v:.2f}" for v in result.timings.values()]})
    add("<h2>Timings</h2>" + _table(timing, ("seconds",)))
    add("</body></html>")
    return "\n".join(s)


def write_report(result: RunResult, ws: Workspace) -> Path:
    folder = ws.reports_dir
    stamp = result.started.strftime("%Y%m%dT%H%M%SZ")
    path = folder / f"run-{stamp}.html"
    text = render_report(result, ws)
    write_text_atomic(path, text)
    write_text_atomic(folder / "latest.html", text)
    return path
