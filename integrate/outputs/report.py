"""The HTML run report: one self-contained file (inline CSS and SVG charts, no scripts, no downloads).

A summary of the figures to read first and a table of contents open the page. Every value from the
records is HTML-escaped, and a Content-Security-Policy allowing no script at all (only inline
styles) makes any value that slipped through inert.
"""

from __future__ import annotations

import html
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..compare import GRADE_NAMES
from ..mapping.spec import Thresholds
from .charts import Marker, category_chart, histogram_chart
from .mapping_section import mapping_changes_section
from .missing import missing_section
from .tables import write_text_atomic

if TYPE_CHECKING:
    from ..pipeline import RunResult
    from ..review.apply import ReviewSummary
    from ..score import ScoreModel
    from ..workspace import Workspace

STRATA_SHOWN = 30  # evidence strata listed in the report

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
.scroll{overflow-x:auto;max-width:100%}td{overflow-wrap:anywhere}
.summary{display:grid;grid-template-columns:repeat(auto-fit,minmax(11rem,1fr));gap:.6rem;margin:1rem 0}
.summary div{border:1px solid #3a5a40;border-radius:.3rem;padding:.4rem .7rem;background:#f4f8f3}
.summary b{display:block;font-size:1.35rem}nav.toc{font-size:.95rem}nav.toc ol{margin:.2rem 0;columns:2 16rem}
"""
# no script may run in the report: only inline styles and inline SVG are allowed
CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; form-action 'none'"


def _e(value: object) -> str:
    return html.escape(str(value))


def _cell(value: object) -> str:
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        return f"{int(value):,}"  # thousands separators
    return str(value)


def _table(frame: pd.DataFrame, numeric: tuple[str, ...] = ()) -> str:
    head = "".join(f"<th>{_e(c)}</th>" for c in frame.columns)
    rows = []
    for row in frame.itertuples(index=False):
        cells = []
        for column, value in zip(frame.columns, row):
            cls = ' class="n"' if column in numeric else ""
            cells.append(f"<td{cls}>{_e(_cell(value))}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f"<div class='scroll'><table><thead><tr>{head}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>"


def _review_section(review: ReviewSummary) -> str:
    """Decisions applied, the model re-estimated with them, and the audited precision of auto-links."""
    parts = ["<h2>Review decisions</h2>",
             f"<p>Applied on this run: {review.same} <em>same</em> (kept together), {review.different} "
             f"<em>different</em> (kept apart); {review.deferred} put off; {review.not_applied} not applied "
             f"because a record no longer exists.</p>"]
    if review.relearned and review.comparison is not None:
        table = review.comparison.copy()
        for column in ("precision (estimated)", "recall (estimated)"):
            table[column] = table[column].map(lambda v: f"{v:.4f}")
        parts.append(f"<p>The Fellegi–Sunter parameters were re-estimated with {review.labelled_same} <em>same</em> "
                     f"and {review.labelled_different} <em>different</em> decisions on candidate pairs. Estimated "
                     "precision and recall at the thresholds (from the match probabilities):</p>")
        parts.append(_table(table[["threshold", "at", "model", "pairs at or above", "precision (estimated)",
                                   "recall (estimated)"]], ("at", "pairs at or above", "precision (estimated)",
                                                            "recall (estimated)")))
    else:
        parts.append(f"<p>The model is re-estimated with decisions once there are at least {review.min_each} of "
                     "each kind (<em>same</em>, <em>different</em>) on candidate pairs.</p>")
    audit = review.audit
    if audit is not None:
        parts.append(f"<p>Precision of automatic links, from a random sample checked by reviewers: "
                     f"{audit.correct} of {audit.checked} correct ({audit.precision:.1%}); 95% Wilson score "
                     f"interval {audit.low:.1%} to {audit.high:.1%} (sample size {audit.checked}; {audit.drawn} "
                     f"drawn).</p>")
    else:
        parts.append("<p>No audit of automatic links yet: <code>integrate review --audit 50</code> draws a "
                     "random sample to check, from which the precision of the links is estimated.</p>")
    return "".join(parts)


CHANGE_LABELS = {  # change-summary fields as the report words them
    "created": "entities created (no record seen before)",
    "merged": "entities formed by merging earlier entities",
    "split": "earlier entities split",
    "split_parts": "entities that are parts of a split",
    "unchanged": "entities unchanged (same records, same ID)",
    "changed": "entities kept with records added or removed",
    "retired": "earlier entities whose records all left",
    "ids_kept": "entity IDs kept",
    "ids_minted": "entity IDs newly issued",
    "records_added": "records added",
    "records_removed": "records removed",
    "records_moved": "records moved to another entity",
    "records_changed": "records whose values changed",
}


def _clusters_section(result: RunResult) -> str:
    """Cuts made by constraints and the chaining guard, and the clusters that deserve a look first."""
    from ..cluster import CHAINING_GUARD, CONTRADICTION, DIFFERENT_BELOW, NEAR_CERTAIN, SPLIT_REASONS

    parts = ["<h3>Cuts and constraints</h3>"]
    splits = [sp for sp in result.splits if sp.reason in SPLIT_REASONS]
    counts = {reason: sum(1 for sp in splits if sp.reason == reason) for reason in SPLIT_REASONS}
    touched = len({sp.component for sp in splits if sp.reason == CHAINING_GUARD})
    parts.append(
        f"<p>A cluster may not hold two records that must be kept apart: a <em>different</em> decision, two "
        f"records of a source declared one record per person, or (the chaining guard) two records compared "
        f"directly with a match probability below {DIFFERENT_BELOW:g}. Such a cluster is cut between them "
        f"into the parts that keep the most evidence together (the sum of the log-odds of the compared "
        f"pairs kept in one part). Cuts: {counts[SPLIT_REASONS[0]]} for different decisions, "
        f"{counts[SPLIT_REASONS[1]]} for one record per person, {counts[CHAINING_GUARD]} by the chaining "
        f"guard, which touched {touched} clusters. Compared pairs with a match probability of at least "
        f"{NEAR_CERTAIN:g} that ended in two entities: {result.near_certain_cut:,} (the goal is none: a cut "
        f"should never separate near-certain evidence).</p>")
    keys = (result.records["_source"].astype(str) + ":" + result.records["_record_id"].astype(str)).to_numpy()
    listed = splits + [sp for sp in result.splits if sp.reason == CONTRADICTION]
    if listed:
        table = pd.DataFrame([{
            "why": sp.reason + (f" ({sp.detail})" if sp.detail else ""),
            "kept apart": f"{keys[sp.kept_apart[0]]} / {keys[sp.kept_apart[1]]}",
            "their probability": "" if sp.probability is None else f"{sp.probability:.3g}",
            "links cut": sp.links_cut, "weight cut": f"{sp.cut_weight:.3f}"} for sp in listed[:200]])
        parts.append(_table(table, ("their probability", "links cut", "weight cut")))
        if len(listed) > 200:
            parts.append(f"<p>... and {len(listed) - 200} more; all of them are in <code>splits.csv</code>.</p>")
    if result.clusters is not None and len(result.clusters):
        several = result.clusters[result.clusters["records"] > 1].head(15)
        parts.append("<h3>Clusters held together most weakly</h3><p>Weakest link = the smallest match "
                     "probability on the strongest tree of links holding the cluster together. The full list, "
                     "to sort as you like, is in <code>clusters.csv</code>.</p>")
        parts.append(_table(several, ("records", "sources", "weakest_link", "lowest_pair_probability",
                                      "possible_links_inside")))
    return "".join(parts)


def _changes_section(result: RunResult) -> str:
    changes = result.changes
    if changes is None:
        return ""
    if changes.previous_run is None:
        return (f"<h2>Changes since the previous run</h2><p>First run recorded in the state store: "
                f"{changes.created} entities, all with new IDs.</p>")
    values = changes.as_dict()
    built = result.incremental
    extra = ""
    if built is not None:  # what the incremental run took from the last one (incremental.py)
        rows = pd.DataFrame({
            "what": ["records unchanged", "records new", "records changed", "records removed",
                     "candidate pairs' grades reused", "candidate pairs compared", "entities kept as they were",
                     "entities resolved again"],
            "count": [built.unchanged, built.new, built.changed, built.removed, built.pairs_reused,
                      built.pairs_compared, built.entities_kept, built.entities_resolved]})
        model = {"kept": "the last run's model scored every pair",
                 "re-estimated": "the model was estimated again on this run's pairs",
                 "given": "the model given to the run scored every pair"}.get(built.model, built.model)
        extra = (f"<p>An incremental run built on run {built.built_on}: only new and changed records were "
                 f"standardised and compared; {_e(model)}.</p>" + _table(rows, ("count",)))
    table = pd.DataFrame({"what": list(CHANGE_LABELS.values()), "count": [values[k] for k in CHANGE_LABELS]})
    return (f"<h2>Changes since the previous run</h2><p>Compared with run {changes.previous_run}. Each entity "
            "keeps the ID of the earlier entity it shares most records with; "
            "<code>changes.csv</code> lists every entity that is not unchanged, and "
            "<code>integrate changes</code> prints this summary.</p>" + _table(table, ("count",)) + extra)


def _source_pair_section(result: RunResult) -> str:
    pairs = result.conflict_pairs
    if pairs is None or pairs.empty:
        return ""
    return ("<h3>Conflicts per source pair</h3><p>Entities where a value from one source differs from a value "
            "from the other, after standardisation (a source paired with itself: its own duplicates "
            "disagree).</p>" + _table(pairs.head(60), ("entities",)))


def _meanings_section(result: RunResult, ws: Workspace) -> str:
    """Which columns of which sources feed each field (with their notes), and numbers that look mislabelled."""
    from ..mapping.checks import run_value_findings
    from ..mapping.meanings import field_meanings

    meanings = field_meanings(ws.canonical, [e.mapping for e in ws.sources])
    table = meanings.assign(source=meanings["source"].replace("", "(no source feeds it)"))
    parts = ["<h3>Meanings: what feeds each field</h3>",
             _table(table[["field", "meaning", "source", "column", "how", "note"]])]
    findings = run_value_findings(result.records, ws, result.crosswalk)
    if findings:
        parts.append("<h3>Numbers to look at</h3><ul>"
                     + "".join(f"<li class='warn'>{_e(f)}</li>" for f in findings) + "</ul>")
    return "".join(parts)


def _borderline_section(result: RunResult, link: float, count: int = 15) -> str:
    """The pairs nearest the link threshold, each with its grades and weights (the explanation)."""
    pairs = result.pairs
    if pairs.empty:
        return ""
    near = pairs.iloc[(pairs["probability"] - link).abs().argsort()[:count]]
    grade_columns = [c for c in pairs.columns if c.startswith("grade_")]
    shown = pd.DataFrame({
        "record a": near["source_a"] + ":" + near["record_id_a"],
        "record b": near["source_b"] + ":" + near["record_id_b"],
        "probability": near["probability"].map(lambda p: f"{p:.3f}"),
        "decision": near["decision"],
        "grades (field: grade)": near[grade_columns].apply(
            lambda row: "; ".join(f"{c[6:]}: {v}" for c, v in row.items() if v != "missing"), axis=1),
        "total weight": near["weight"].map(lambda w: f"{w:+.1f}"),
    })
    return ("<h3>Borderline pairs</h3><p>The candidate pairs closest to the link threshold, with each field's "
            "agreement grade; <code>integrate explain A B</code> shows a pair's weights field by field, and "
            "<code>pairs.parquet</code> holds them for every pair.</p>"
            + _table(shown, ("probability", "total weight")))


def _quality_section(result: RunResult) -> str:
    """Precision and recall against a known-true crosswalk, and how the hardest non-matches fared."""
    quality = result.quality
    if quality is None:
        return ""
    e = quality.evaluation
    rows = pd.DataFrame([
        {"measure": "pairwise", "precision": f"{e.pairwise.precision:.4f}", "recall": f"{e.pairwise.recall:.4f}",
         "F1": f"{e.pairwise.f1:.4f}"},
        {"measure": "B-cubed", "precision": f"{e.bcubed.precision:.4f}", "recall": f"{e.bcubed.recall:.4f}",
         "F1": f"{e.bcubed.f1:.4f}"},
    ])
    text = (f"<h2>Quality against {_e(quality.truth_file)}</h2><p>Known-true crosswalk: {e.true_pairs} true pairs, "
            f"{e.predicted_pairs} pairs merged by this run; blocking kept {e.pairs_completeness:.4f} of the true "
            f"pairs (pairs completeness).</p>" + _table(rows, ("precision", "recall", "F1")))
    if not quality.hard_negatives.empty:
        text += ("<h3>Hard non-matches</h3><p>Different people who look alike: candidate pairs of each kind and how "
                 "many were wrongly merged.</p>"
                 + _table(quality.hard_negatives, ("candidate pairs", "wrongly merged")))
    return text


def _summary(result: RunResult, thresholds: Thresholds, decisions: pd.Series) -> str:
    """The figures to read first: records in, entities out, links, review, precision, changes.

    ``decisions``: candidate pairs per decision (counted once for the whole report).
    """
    records = int(sum(result.source_counts.values()))
    probability = result.pairs["probability"].to_numpy(float)
    linked = probability[probability >= thresholds.link]
    precision = f"{linked.mean():.1%}" if len(linked) else "n/a"
    how = "model estimate: mean match probability of the links"
    audit = getattr(result.review, "audit", None) if result.review is not None else None
    if audit is not None:
        precision, how = f"{audit.precision:.1%}", f"checked by reviewers on {audit.checked:,} sampled links"
    changes = result.changes
    detail = "details under Changes"
    if changes is None:
        changed = "not recorded"
    elif changes.previous_run is None:
        changed = "first run"
    else:
        changed = f"{changes.records_moved:,} records moved"
        detail = (f"{changes.created:,} entities created, {changes.merged:,} merged, {changes.split:,} split "
                  f"(run {changes.previous_run} before)")
    tiles = [("records in", f"{records:,}", f"from {len(result.source_counts):,} sources"),
             ("entities out", f"{result.merged.shape[0]:,}", "one row each in merged.csv"),
             ("links", f"{int(decisions.get('link', 0)):,}", f"pairs at or above {thresholds.link:g}"),
             ("possible links to review", f"{int(decisions.get('possible link', 0)):,}",
              f"pairs from {thresholds.review:g} to {thresholds.link:g}: integrate review"),
             ("estimated precision", precision, how),
             ("since the last run", changed, detail)]
    return ("<section id='summary' aria-label='Summary'><div class='summary'>"
            + "".join(f"<div><span>{_e(a)}</span><b>{_e(b)}</b><small>{_e(c)}</small></div>" for a, b, c in tiles)
            + "</div></section>")


def _with_contents(body: str) -> str:
    """Give every section heading an id and put a table of contents where ``<!--toc-->`` stands."""
    import re

    titles: list[tuple[str, str]] = []

    def anchor(m: re.Match[str]) -> str:
        slug = f"s{len(titles) + 1}"
        titles.append((slug, m.group(1)))
        return f"<h2 id='{slug}'>{m.group(1)}</h2>"

    body = re.sub(r"<h2>(.*?)</h2>", anchor, body)
    toc = ("<nav class='toc' aria-label='Contents'><h2 id='contents'>Contents</h2><ol>"
           + "".join(f"<li><a href='#{slug}'>{title}</a></li>" for slug, title in titles) + "</ol></nav>")
    return body.replace("<!--toc-->", toc, 1)


def _weight_markers(thresholds: Thresholds) -> list[Marker]:
    """The link and review thresholds as log2 odds: p = 1 / (1 + 2^-(weight + prior weight))."""
    return [Marker(float(np.log2(t / (1 - t))), f"{name} {t:g}", colour)
            for name, t, colour in (("link", thresholds.link, "#b00020"), ("review", thresholds.review, "#8a6d00"))]


def _strata_table(model: ScoreModel) -> str:
    """The share of matches per evidence stratum (which fields a pair can compare), largest first."""
    names = list(model.fields)
    rows = [{"fields both records have": ", ".join(f for c, f in enumerate(names) if (key >> c) & 1) or "none",
             "share of matches": f"{share:.6f}", "prior weight (bits)": f"{np.log2(share / (1 - share)):+.2f}"}
            for key, share in sorted(model.strata.items(), key=lambda kv: -kv[1])[:STRATA_SHOWN]]
    return ("<details><summary>Prior by evidence stratum: pairs that can compare different fields start from "
            "different odds</summary>" + _table(pd.DataFrame(rows)) + "</details>")


def render_report(result: RunResult, ws: Workspace | None = None) -> str:
    s: list[str] = []
    add = s.append
    entities = result.merged.shape[0]
    records = int(sum(result.source_counts.values()))
    thresholds = ws.canonical.thresholds if ws is not None else Thresholds()
    add(f"<!doctype html><html lang='en'><head><meta charset='utf-8'>"
        f"<meta http-equiv='Content-Security-Policy' content=\"{CSP}\">"
        f"<meta name='viewport' content='width=device-width, initial-scale=1'>"
        f"<title>Run report {_e(result.started)}</title><style>{_CSS}</style></head><body>")
    add(f"<h1>Run report</h1><p>Run started {_e(result.started.isoformat())}; {records:,} records from "
        f"{len(result.source_counts):,} sources became {entities:,} entities.</p>")
    decisions = result.pairs["decision"].value_counts()  # one pass over the pairs, used twice
    add(_summary(result, thresholds, decisions))
    add("<!--toc-->")
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
    add(f"<p>{b.candidate_pairs:,} candidate pairs out of {b.all_pairs:,} possible pairs "
        f"(reduction ratio {b.reduction_ratio:.6f}).</p>")
    if b.identical_copies:
        add(f"<p>{b.identical_copies:,} records were identical to another record of their source (same "
            "standard values in every compared field, three or more filled): each group was matched once and "
            "its copies joined its entity, with no candidate pairs of their own.</p>")
    rules = pd.DataFrame({"rule": b.rules, "pairs": [b.pairs_per_rule[r] for r in b.rules],
                          "found by this rule only": [b.unique_per_rule[r] for r in b.rules]})
    add(_table(rules, ("pairs", "found by this rule only")))
    largest = [{"rule": r, "largest blocks (key: records)": ", ".join(f"{k}: {n}" for k, n in b.largest_blocks[r][:3])}
               for r in b.rules if b.largest_blocks.get(r)]
    if largest:
        add("<details><summary>Largest blocks per rule</summary>" + _table(pd.DataFrame(largest)) + "</details>")
    if b.skipped_blocks:
        add("<p class='warn'>Blocks skipped because they were too large: "
            + "; ".join(f"{_e(r)} = '{_e(k)}' ({n} records)" for r, k, n in b.skipped_blocks[:20]) + "</p>")

    add("<h2>Scores</h2>")
    add(_table(decisions.rename_axis("decision").reset_index(name="pairs"), ("pairs",)))
    weights = result.pairs["weight"].to_numpy(float)
    if "prior_weight" in result.pairs:
        weights = weights + result.pairs["prior_weight"].to_numpy(float)
    if len(weights):
        counts, edges = np.histogram(weights, bins=40)
        add("<figure>" + histogram_chart(edges, counts, "Candidate pairs by log odds of a match",
                                         "total weight + prior weight (bits)", "candidate pairs", log_scale=True,
                                         markers=_weight_markers(thresholds))
            + "<figcaption>Candidate pairs by the log2 odds of a match, their total weight plus the prior weight "
              "of their evidence stratum (log scale): matches gather on the right, non-matches on the left; "
              "the dashed lines are the link and review thresholds, and the pairs between them are the "
              "possible links.</figcaption></figure>")
        counts, edges = np.histogram(result.pairs["probability"].to_numpy(float), bins=20, range=(0.0, 1.0))
        add("<figure>" + histogram_chart(edges, counts, "Candidate pairs by match probability", "match probability",
                                         "candidate pairs", log_scale=True, x_format="{:.2f}",
                                         markers=[Marker(thresholds.link, f"link {thresholds.link:g}"),
                                                  Marker(thresholds.review, f"review {thresholds.review:g}",
                                                         "#8a6d00")])
            + "<figcaption>Number of candidate pairs per band of match probability (log scale).</figcaption>"
              "</figure>")
    model = result.model
    add(f"<p>Fellegi–Sunter model estimated by EM in {model.iterations} iterations "
        f"({'converged' if model.converged else 'not converged'}); share of matches among all record pairs "
        f"λ = {model.prior:.6f}. Besides matches, the model has classes for pairs that are not the same person "
        f"but share something: " + ", ".join(f"{_e(k)} ({v:.6f})" for k, v in model.class_shares.items()
                                             if k not in ("match",)) + ".</p>")
    if model.strata:
        add(_strata_table(model))
    rows = []
    for fm in model.fields.values():
        for level, (m, u, ur, w) in enumerate(zip(fm.m, fm.u, fm.u_random, fm.weights)):
            rows.append({"field": fm.name, "grade": GRADE_NAMES[fm.type][level], "m": f"{m:.4f}",
                         "u (non-matches)": f"{u:.6f}", "u (random pairs)": f"{ur:.5f}", "weight (bits)": f"{w:+.2f}"})
    add("<details><summary>m- and u-probabilities and weights per field and grade</summary>"
        + _table(pd.DataFrame(rows), ("m", "u (non-matches)", "u (random pairs)", "weight (bits)")) + "</details>")

    add(_borderline_section(result, thresholds.link))
    add(_quality_section(result))

    add("<h2>Entities</h2>")
    sizes = result.crosswalk.groupby("entity_id").size().value_counts().sort_index()
    add("<figure>" + category_chart([str(k) for k in sizes.index], sizes.astype(float).tolist(),
                                    "Entities by number of records", "records in the entity", "entities",
                                    log_scale=True)
        + "<figcaption>Entities by number of records (log scale). Large clusters deserve a look.</figcaption></figure>")
    conflicts = result.provenance.groupby("field")["conflict"].sum().astype(int)
    conflict_table = conflicts.rename_axis("field").reset_index(name="entities with conflicting values")
    conflict_table = conflict_table.sort_values(["entities with conflicting values", "field"],
                                                ascending=[False, True], kind="mergesort")
    add("<h3>Conflicts per field</h3>" + _table(conflict_table, ("entities with conflicting values",)))
    add(missing_section(result))  # outputs/missing.py
    add(_source_pair_section(result))
    add(_clusters_section(result))
    add(_changes_section(result))

    review = getattr(result, "review", None)
    if review is not None:
        add(_review_section(review))

    add("<h2>Mapping files used</h2>")
    hashes = pd.DataFrame({"file": list(result.mapping_hashes), "sha256": list(result.mapping_hashes.values())})
    add(_table(hashes))
    add(mapping_changes_section(result, ws))
    if ws is not None:
        fields = pd.DataFrame([{"field": n, "type": f.type, "meaning": f.meaning, "resolution rule": f.resolve}
                               for n, f in ws.canonical.fields.items()])
        add("<h3>Canonical fields</h3>" + _table(fields))
        add(_meanings_section(result, ws))
    timing = pd.DataFrame({"stage": list(result.timings), "seconds": [f"{v:.2f}" for v in result.timings.values()]})
    add("<h2>Timings</h2>" + _table(timing, ("seconds",)))
    add("</body></html>")
    return _with_contents("\n".join(s))


def write_report(result: RunResult, ws: Workspace) -> Path:
    folder = ws.reports_dir
    stamp = result.started.strftime("%Y%m%dT%H%M%SZ")
    path = folder / f"run-{stamp}.html"
    text = render_report(result, ws)
    write_text_atomic(path, text)
    write_text_atomic(folder / "latest.html", text)
    return path
