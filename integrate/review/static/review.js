// The review page's behaviour. Every record value is put on the page as text (textContent),
// never as HTML, so a value such as <script> stays inert.
"use strict";

const state = { item: null, cluster: null, busy: false, undo: [], reviewer: "", kind: "possible" };
const $ = (id) => document.getElementById(id);
const LABELS = { same: "same person", different: "different people", defer: "decide later" };

function el(tag, text, cls) {
  const node = document.createElement(tag);
  if (text !== undefined && text !== null) node.textContent = String(text);
  if (cls) node.className = cls;
  return node;
}

function say(message, problem) {
  const status = $("status");
  status.textContent = message;
  status.classList.toggle("problem", Boolean(problem));
}

function pairName(key) {
  return `${key.source_a} ${key.record_id_a} and ${key.source_b} ${key.record_id_b}`;
}

// The page speaks to the service's review routes with the session's bearer token, which arrives in
// the address's fragment (#token=...), is kept in this tab's sessionStorage and removed from the address.
const ws = decodeURIComponent(location.pathname.split("/")[2] || "");
const base = `/api/v1/workspaces/${encodeURIComponent(ws)}`;
const queue = new URLSearchParams(location.search).get("queue") === "audit" ? "audit" : "possible";
const askedCluster = new URLSearchParams(location.search).get("cluster");
(function takeToken() {
  const found = /(?:^#|&)token=([^&]+)/.exec(location.hash);
  if (found) {
    sessionStorage.setItem("integrate-token", decodeURIComponent(found[1]));
    history.replaceState(null, "", location.pathname + location.search);
  }
})();

async function api(method, path, body) {
  const options = { method, headers: { "Accept": "application/json" } };
  const token = sessionStorage.getItem("integrate-token");
  if (token) options.headers["Authorization"] = `Bearer ${token}`;
  if (body !== undefined) {
    options.headers["Content-Type"] = "application/json";
    options.body = JSON.stringify(body);
  }
  const response = await fetch(base + path, options);
  let payload = null;
  try { payload = await response.json(); } catch (e) { payload = null; }
  return { status: response.status, body: payload };
}

function filters() {
  const params = new URLSearchParams({ queue });
  if ($("source-filter").value) params.set("source", $("source-filter").value);
  if ($("field-filter").value) params.set("field", $("field-filter").value);
  return params;
}

function nextBody(skip) {
  const body = { queue, source: $("source-filter").value || null, field: $("field-filter").value || null };
  if (skip) body.skip = skip;
  return body;
}

function showProgress(progress) {
  const bar = $("progress-bar");
  bar.max = Math.max(progress.total, 1);
  bar.value = progress.decided;
  const later = progress.deferred ? `, ${progress.deferred} put off` : "";
  $("progress-text").textContent = `${progress.decided} decided, ${progress.remaining} remaining${later} (of ${progress.total})`;
}

function valueCell(parts, text) {
  const cell = el("td", null, "value");
  if (!text) {
    cell.appendChild(el("span", "(empty)", "missing"));
    return cell;
  }
  for (const [piece, changed] of parts) {
    cell.appendChild(changed ? el("mark", piece) : document.createTextNode(piece));
  }
  return cell;
}

function recordHeading(cell, letter, record) {
  cell.textContent = "";
  cell.appendChild(el("span", `Record ${letter}:`, "which"));
  cell.appendChild(el("span", `${record.source} ${record.record_id}`, "record-name"));
  const trust = record.trust === null || record.trust === undefined ? "" : `, trust rank ${record.trust}`;
  cell.appendChild(el("span", `as of ${record.as_of}${trust}`, "note"));
  if (record.entity_id) {
    const link = el("button", `entity ${record.entity_id}`, "link");
    link.type = "button";
    link.dataset.entity = record.entity_id;
    link.addEventListener("click", () => showEntity(record.entity_id));
    cell.appendChild(link);
  }
}

async function showEntity(entityId) {
  const result = await api("GET", `/entities/${encodeURIComponent(entityId)}`);
  const panel = $("entity");
  panel.textContent = "";
  panel.hidden = false;
  if (result.status !== 200) { panel.appendChild(el("p", `Could not load entity ${entityId} (HTTP ${result.status}).`)); return; }
  const story = result.body;
  panel.appendChild(el("h2", `Entity ${story.entity_id}: ${story.members.length} records`));
  const table = el("table");
  const head = el("tr");
  for (const name of ["field", "merged value", "from", "rule", "why"]) head.appendChild(el("th", name));
  table.appendChild(head);
  for (const p of story.provenance) {
    const row = el("tr");
    row.appendChild(el("th", p.field));
    row.appendChild(el("td", p.value, "value"));
    row.appendChild(el("td", p.source ? `${p.source} ${p.record_id}` : ""));
    row.appendChild(el("td", p.rule));
    row.appendChild(el("td", p.why + (p.conflict ? "; the values conflict" : "")));
    table.appendChild(row);
  }
  panel.appendChild(table);
  panel.appendChild(el("p", `The same as: integrate show ${story.entity_id}`, "note"));
  panel.focus();
}

function recordName(r) {
  return `${r.source} ${r.record_id}`;
}

// A cluster shown as a whole: one column per record (part A first), every canonical field a row.
// Each record's part is written in its header and in every cell it holds ("Part A" / "Part B"),
// and the reviewer can move a record to the other part before splitting.
function renderCluster(cluster) {
  state.cluster = cluster;
  const section = $("cluster");
  section.hidden = !cluster;
  $("btn-keep").hidden = !cluster;
  $("btn-split").hidden = !cluster;
  $("btn-same").hidden = Boolean(cluster);
  $("btn-different").hidden = Boolean(cluster);
  if (!cluster) return;
  $("pair").dataset.cluster = cluster.cluster_id;
  $("fields").hidden = true;
  $("both-empty").textContent = "";
  const records = [...cluster.records].sort((x, y) => (x.part === y.part ? 0 : x.part === "A" ? -1 : 1));
  state.parts = Object.fromEntries(records.map((r) => [recordName(r), r.part]));
  const summary = $("summary");
  summary.textContent = "";
  summary.appendChild(el("p", `Cluster of ${records.length} records`, "probability"));
  summary.appendChild(el("p", `In the queue as: ${cluster.reason}.`));
  const from = cluster.proposal === "run cut" ? "where the last run cut it" : "at its weakest link";
  summary.appendChild(el("p", `Proposed split (${from}): part A ${cluster.part_a} records, part B ${cluster.part_b} records; the link cut has match probability ${(100 * cluster.probability).toFixed(1)} %.`));
  if (cluster.decision) summary.appendChild(el("p", `Decided: ${cluster.decision.choice} by ${cluster.decision.reviewer}.`));
  drawCluster(records);
}

function drawCluster(records) {
  const cluster = state.cluster;
  const head = $("cluster-records").tHead.rows[0];
  head.textContent = "";
  const corner = el("th", "Field");
  corner.scope = "col";
  head.appendChild(corner);
  records.forEach((r, n) => {
    const part = state.parts[recordName(r)];
    const cell = el("th", null, part === "A" ? "part-a" : "part-b");
    cell.scope = "col";
    cell.appendChild(el("span", `Part ${part}`, "part-label"));
    cell.appendChild(el("span", recordName(r), "record-name"));
    const trust = r.trust === null || r.trust === undefined ? "" : `, trust rank ${r.trust}`;
    cell.appendChild(el("span", `as of ${r.as_of}${trust}${r.entity_id ? `; entity ${r.entity_id}` : ""}`, "note"));
    const move = el("button", part === "A" ? "Move to part B" : "Move to part A", "link");
    move.type = "button";
    move.id = `move-${n}`;
    move.addEventListener("click", () => {
      state.parts[recordName(r)] = part === "A" ? "B" : "A";
      $("btn-split").textContent = "";
      $("btn-split").append("Split as shown ", el("kbd", "P"));
      drawCluster(records);
    });
    cell.appendChild(move);
    head.appendChild(cell);
  });
  const body = $("cluster-records").tBodies[0];
  body.textContent = "";
  for (const field of cluster.fields) {
    if (records.every((r) => !r.values[field.name])) continue;
    const row = el("tr", null, field.varies ? "varies" : "");
    const name = el("th", field.name);
    name.scope = "row";
    if (field.varies) name.appendChild(el("span", "values differ", "note"));
    row.appendChild(name);
    for (const r of records) {
      const part = state.parts[recordName(r)];
      const cell = el("td", null, `value ${part === "A" ? "part-a" : "part-b"}`);
      cell.appendChild(el("span", `${part}:`, "visually-hidden"));
      if (r.values[field.name]) cell.appendChild(document.createTextNode(r.values[field.name]));
      else cell.appendChild(el("span", "(empty)", "missing"));
      row.appendChild(cell);
    }
    body.appendChild(row);
  }
  const a = records.filter((r) => state.parts[recordName(r)] === "A").map(recordName);
  const b = records.filter((r) => state.parts[recordName(r)] === "B").map(recordName);
  $("cluster-split").textContent = `Part A: ${a.join(", ") || "(none)"}. Part B: ${b.join(", ") || "(none)"}.`;
  const pairs = $("cluster-pairs").tBodies[0];
  pairs.textContent = "";
  for (const p of cluster.pairs) {
    const x = `${p.key.source_a} ${p.key.record_id_a}`;
    const y = `${p.key.source_b} ${p.key.record_id_b}`;
    const inA = state.parts[x] === "A";
    const inB = state.parts[y] === "A";
    const where = inA && inB ? "inside part A" : (!inA && !inB ? "inside part B" : "across the split");
    const row = el("tr", null, p.proposed_cut ? "cut" : "");
    row.appendChild(el("td", `${x} and ${y}`));
    row.appendChild(el("td", `${(100 * p.probability).toFixed(1)} %`, "num"));
    row.appendChild(el("td", where + (p.proposed_cut ? " (the proposed cut)" : "")));
    row.appendChild(el("td", p.decision ? `${LABELS[p.decision]} (${p.decided_by})` : ""));
    pairs.appendChild(row);
  }
}

function render(item, cluster) {
  state.item = item;
  $("pair").dataset.item = item ? item.id : "";
  $("pair").dataset.cluster = "";
  state.cluster = null;
  $("entity").hidden = true;
  const body = $("fields").tBodies[0];
  body.textContent = "";
  const summary = $("summary");
  summary.textContent = "";
  const empty = !item;
  $("empty").hidden = !empty;
  $("both-empty").textContent = "";
  $("fields").hidden = empty;
  for (const id of ["btn-same", "btn-different", "btn-defer", "btn-keep", "btn-split"]) $(id).disabled = empty;
  $("btn-split").textContent = "";
  $("btn-split").append("Split as proposed ", el("kbd", "P"));
  renderCluster(null);
  if (empty) return;
  const percent = (100 * item.probability).toFixed(1);
  summary.appendChild(el("p", `Match probability ${percent} %`, "probability"));
  summary.appendChild(el("p", `Total weight ${item.weight.toFixed(2)} bits; the last run called this a ${item.run_decision}.`));
  if (item.blocking_rules) summary.appendChild(el("p", `Found as a candidate pair by: ${item.blocking_rules.split(",").join(", ")}`));
  const why = el("p", `Explanation: the table below gives each field's agreement and the weight it adds; the same as: integrate explain ${item.key.source_a}:${item.key.record_id_a} ${item.key.source_b}:${item.key.record_id_b}`, "note");
  why.id = "explanation";
  summary.appendChild(why);
  if (item.kind === "audit") summary.appendChild(el("p", "Audit: a randomly drawn automatic link. Is it right?"));
  else if (item.reason && item.reason !== "possible link") summary.appendChild(el("p", `In the queue as the ${item.reason}.`));
  recordHeading($("head-a"), "A", item.records[0]);
  recordHeading($("head-b"), "B", item.records[1]);
  const bothEmpty = [];
  for (const field of item.fields) {
    if (!field.a && !field.b) { bothEmpty.push(field.name); continue; }
    const row = el("tr");
    const differs = field.a && field.b && field.a_parts.some((p) => p[1]);
    if (differs) row.className = "differs";
    const name = el("th", field.name);
    name.scope = "row";
    if (differs) name.appendChild(el("span", "values differ", "note"));
    row.appendChild(name);
    row.appendChild(valueCell(field.a_parts, field.a));
    row.appendChild(valueCell(field.b_parts, field.b));
    row.appendChild(el("td", field.compared ? field.grade : "not compared"));
    const weight = el("td", field.weight === null ? "" : (field.weight > 0 ? "+" : "") + field.weight.toFixed(2), "num");
    if (field.weight_note) weight.appendChild(el("span", field.weight_note, "note"));
    row.appendChild(weight);
    body.appendChild(row);
  }
  $("both-empty").textContent = bothEmpty.length ? `Empty in both records: ${bothEmpty.join(", ")}.` : "";
  $("note").value = "";
  if (cluster) renderCluster(cluster);
}

async function loadNext(skip) {
  const result = await api("POST", "/review/next", nextBody(skip));
  if (result.status !== 200) { say(`Could not load the next pair (HTTP ${result.status}).`, true); return; }
  showProgress(result.body.progress);
  render(result.body.item, result.body.cluster);
}

async function showCluster(clusterId) {
  const result = await api("GET", `/review/clusters/${encodeURIComponent(clusterId)}`);
  if (result.status !== 200) { say(`Could not load cluster ${clusterId} (HTTP ${result.status}).`, true); return; }
  const anchor = await api("GET", `/review/pair?${new URLSearchParams({ ...result.body.anchor, queue })}`);
  render(anchor.status === 200 ? anchor.body : null, result.body);
  if (anchor.status !== 200) renderCluster(result.body);
}

async function decideCluster(choice) {
  if (state.busy || !state.cluster) return;
  state.busy = true;
  const cluster = state.cluster;
  const body = { choice, note: $("note").value || null, queue };
  const partA = cluster.records.filter((r) => state.parts[recordName(r)] === "A");
  const edited = cluster.records.some((r) => state.parts[recordName(r)] !== r.part);
  if (choice === "split" && edited) body.part_a = partA.map((r) => ({ source: r.source, record_id: r.record_id }));
  try {
    const result = await api("POST", `/review/clusters/${encodeURIComponent(cluster.cluster_id)}/decision`, body);
    if (result.status === 201) {
      const stored = result.body.cluster_decision;
      state.undo.push({ cluster: stored.id });
      await loadNext(null);
      const how = choice === "split" ? `split (part A: ${stored.parts.A.length}, part B: ${stored.parts.B.length} records)` : "kept together";
      say(`Saved: cluster ${cluster.cluster_id} ${how}, as ${stored.decisions.length} pair decisions.`);
    } else if (result.status === 409) {
      const e = result.body.existing;
      say(`Not saved: ${e.reviewer} already decided ${LABELS[e.decision]} for ${pairName(e)} in this cluster.`, true);
    } else {
      const why = result.body && result.body.error ? result.body.error.message : `HTTP ${result.status}`;
      say(`Not saved: ${why}.`, true);
    }
  } finally {
    state.busy = false;
  }
}

async function decide(decision) {
  if (state.busy || !state.item) return;
  state.busy = true;
  const item = state.item;
  const body = { ...item.key, decision, note: $("note").value || null, queue };
  try {
    const result = await api("POST", "/review/decisions", body);
    if (result.status === 201) {
      state.undo.push(result.body.decision.id);
      await loadNext(decision === "defer" ? item.key : null);
      say(`Saved: ${LABELS[decision]} for ${pairName(item.key)}.`);
    } else if (result.status === 409) {
      const e = result.body.existing;
      const note = e.note ? ` Their note: ${e.note}` : "";
      await loadNext(null);
      say(`Not saved: ${e.reviewer} already decided ${LABELS[e.decision]} for ${pairName(item.key)}.${note}`, true);
    } else {
      say(`Not saved (HTTP ${result.status}). Try again.`, true);
    }
  } finally {
    state.busy = false;
  }
}

async function undo() {
  if (state.busy) return;
  const id = state.undo.pop();
  if (id === undefined) { say("Nothing to undo in this session.", true); return; }
  state.busy = true;
  if (typeof id === "object") {
    try { await undoCluster(id.cluster); } finally { state.busy = false; }
    return;
  }
  try {
    const result = await api("POST", "/review/undo", { decision_id: id, queue });
    if (result.status === 200) {
      const row = result.body.undone;
      if (result.body.item) render(result.body.item);
      const progress = await api("GET", `/review/next?${filters()}`);
      if (progress.status === 200) showProgress(progress.body.progress);
      say(`Undone: ${LABELS[row.decision]} for ${pairName(row)}. Decide again.`);
    } else {
      say(`Could not undo: ${result.body && result.body.error ? result.body.error.message : "HTTP " + result.status}.`, true);
    }
  } finally {
    state.busy = false;
  }
}

async function undoCluster(groupId) {
  const result = await api("POST", "/review/clusters/undo", { cluster_decision_id: groupId });
  if (result.status !== 200) {
    say(`Could not undo: ${result.body && result.body.error ? result.body.error.message : "HTTP " + result.status}.`, true);
    return;
  }
  const undone = result.body.undone;
  if (result.body.cluster) await showCluster(undone.cluster_id);
  const progress = await api("GET", `/review/next?${filters()}`);
  if (progress.status === 200) showProgress(progress.body.progress);
  say(`Undone: ${undone.choice} for cluster ${undone.cluster_id} (${undone.decisions.length} pair decisions). Decide again.`);
}

function onKey(event) {
  if (event.ctrlKey || event.metaKey || event.altKey) return;
  const typing = ["TEXTAREA", "INPUT", "SELECT"].includes(event.target.tagName);
  if (typing) {
    if (event.key === "Escape") { event.target.blur(); event.preventDefault(); }
    return;
  }
  const key = event.key.toLowerCase();
  const cluster = Boolean(state.cluster);
  const actions = { l: () => decide("defer"), u: undo, n: () => $("note").focus() };
  if (cluster) Object.assign(actions, { k: () => decideCluster("keep together"), p: () => decideCluster("split") });
  else Object.assign(actions, { s: () => decide("same"), d: () => decide("different") });
  if (actions[key]) { event.preventDefault(); actions[key](); }
}

async function start() {
  const session = await api("GET", `/review/session?queue=${queue}`);
  if (session.status !== 200) {
    const why = session.status === 401 ? " Open the address the server printed (it holds this session's token)." : "";
    say(`Could not reach the review server (HTTP ${session.status}).${why}`, true);
    return;
  }
  const info = session.body;
  state.kind = info.queue;
  state.reviewer = info.reviewer;
  $("reviewer").textContent = info.reviewer;
  $("queue-name").textContent = info.queue === "audit" ? "Audit of automatic links" : "Possible links";
  $("note-trust").textContent = info.notes.trust;
  $("note-queue").textContent = info.notes.queue;
  $("note-weights").textContent = info.notes.weights;
  for (const source of info.sources) $("source-filter").appendChild(el("option", source));
  for (const field of info.fields) $("field-filter").appendChild(el("option", field));
  for (const s of info.shortcuts) {
    const li = el("li");
    li.appendChild(el("kbd", s.key));
    li.appendChild(document.createTextNode(` ${s.action}`));
    $("keys").appendChild(li);
  }
  $("filters").addEventListener("submit", (e) => e.preventDefault());
  $("source-filter").addEventListener("change", () => loadNext(null));
  $("field-filter").addEventListener("change", () => loadNext(null));
  for (const button of document.querySelectorAll("button[data-decision]")) {
    button.addEventListener("click", () => decide(button.dataset.decision));
  }
  $("btn-undo").addEventListener("click", undo);
  $("btn-keep").addEventListener("click", () => decideCluster("keep together"));
  $("btn-split").addEventListener("click", () => decideCluster("split"));
  document.addEventListener("keydown", onKey);
  if (askedCluster) await showCluster(askedCluster);
  else await loadNext(null);
  document.body.dataset.ready = "yes";
}

document.addEventListener("DOMContentLoaded", start);
