// The review page's behaviour. Every record value is put on the page as text (textContent),
// never as HTML, so a value such as <script> stays inert.
"use strict";

const state = { item: null, busy: false, undo: [], reviewer: "", kind: "possible" };
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

async function api(method, path, body) {
  const options = { method, headers: { "Accept": "application/json" } };
  if (body !== undefined) {
    options.headers["Content-Type"] = "application/json";
    options.body = JSON.stringify(body);
  }
  const response = await fetch(path, options);
  let payload = null;
  try { payload = await response.json(); } catch (e) { payload = null; }
  return { status: response.status, body: payload };
}

function filters() {
  const params = new URLSearchParams({ reviewer: state.reviewer });
  if ($("source-filter").value) params.set("source", $("source-filter").value);
  if ($("field-filter").value) params.set("field", $("field-filter").value);
  return params;
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
  cell.appendChild(document.createTextNode(`Record ${letter}: ${record.source} ${record.record_id}`));
  const trust = record.trust === null || record.trust === undefined ? "" : `, trust rank ${record.trust}`;
  cell.appendChild(el("span", `as of ${record.as_of}${trust}`, "note"));
}

function render(item) {
  state.item = item;
  $("pair").dataset.item = item ? item.id : "";
  const body = $("fields").tBodies[0];
  body.textContent = "";
  const summary = $("summary");
  summary.textContent = "";
  const empty = !item;
  $("empty").hidden = !empty;
  $("both-empty").textContent = "";
  $("fields").hidden = empty;
  for (const id of ["btn-same", "btn-different", "btn-defer"]) $(id).disabled = empty;
  if (empty) return;
  const percent = (100 * item.probability).toFixed(1);
  summary.appendChild(el("p", `Match probability ${percent} %`, "probability"));
  summary.appendChild(el("p", `Total weight ${item.weight.toFixed(2)} bits; the last run called this a ${item.run_decision}.`));
  if (item.blocking_rules) summary.appendChild(el("p", `Found as a candidate pair by: ${item.blocking_rules.split(",").join(", ")}`));
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
}

async function loadNext(skip) {
  const params = filters();
  if (skip) params.set("skip", skip);
  const result = await api("GET", `/api/next?${params}`);
  if (result.status !== 200) { say(`Could not load the next pair (HTTP ${result.status}).`, true); return; }
  showProgress(result.body.progress);
  render(result.body.item);
}

async function decide(decision) {
  if (state.busy || !state.item) return;
  if (!state.reviewer) { say("Type your name in Reviewer first.", true); $("reviewer").focus(); return; }
  state.busy = true;
  const item = state.item;
  const body = { ...item.key, decision, reviewer: state.reviewer, note: $("note").value || null };
  try {
    const result = await api("POST", "/api/decisions", body);
    if (result.status === 201) {
      state.undo.push(result.body.decision.id);
      await loadNext(decision === "defer" ? item.id : "");
      say(`Saved: ${LABELS[decision]} for ${pairName(item.key)}.`);
    } else if (result.status === 409) {
      const e = result.body.existing;
      const note = e.note ? ` Their note: ${e.note}` : "";
      await loadNext("");
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
  try {
    const result = await api("POST", "/api/undo", { decision_id: id, reviewer: state.reviewer });
    if (result.status === 200) {
      const row = result.body.undone;
      if (result.body.item) render(result.body.item);
      const progress = await api("GET", `/api/next?${filters()}`);
      if (progress.status === 200) showProgress(progress.body.progress);
      say(`Undone: ${LABELS[row.decision]} for ${pairName(row)}. Decide again.`);
    } else {
      say(`Could not undo: ${result.body && result.body.detail ? result.body.detail : "HTTP " + result.status}.`, true);
    }
  } finally {
    state.busy = false;
  }
}

function onKey(event) {
  if (event.ctrlKey || event.metaKey || event.altKey) return;
  const typing = ["TEXTAREA", "INPUT", "SELECT"].includes(event.target.tagName);
  if (typing) {
    if (event.key === "Escape") { event.target.blur(); event.preventDefault(); }
    return;
  }
  const key = event.key.toLowerCase();
  const actions = { s: () => decide("same"), d: () => decide("different"), l: () => decide("defer"), u: undo,
                    n: () => $("note").focus() };
  if (actions[key]) { event.preventDefault(); actions[key](); }
}

async function start() {
  const session = await api("GET", "/api/session");
  if (session.status !== 200) { say("Could not reach the review server.", true); return; }
  const info = session.body;
  state.kind = info.kind;
  state.reviewer = localStorage.getItem("integrate-reviewer") || info.reviewer;
  $("reviewer").value = state.reviewer;
  $("queue-name").textContent = info.kind === "audit" ? "Audit of automatic links" : "Possible links";
  for (const source of info.sources) $("source-filter").appendChild(el("option", source));
  for (const field of info.fields) $("field-filter").appendChild(el("option", field));
  for (const s of info.shortcuts) {
    const li = el("li");
    li.appendChild(el("kbd", s.key));
    li.appendChild(document.createTextNode(` ${s.action}`));
    $("keys").appendChild(li);
  }
  $("reviewer").addEventListener("change", () => {
    state.reviewer = $("reviewer").value.trim();
    localStorage.setItem("integrate-reviewer", state.reviewer);
    state.undo = [];
    loadNext("");
  });
  $("filters").addEventListener("submit", (e) => e.preventDefault());
  $("source-filter").addEventListener("change", () => loadNext(""));
  $("field-filter").addEventListener("change", () => loadNext(""));
  for (const button of document.querySelectorAll("button[data-decision]")) {
    button.addEventListener("click", () => decide(button.dataset.decision));
  }
  $("btn-undo").addEventListener("click", undo);
  document.addEventListener("keydown", onKey);
  await loadNext("");
  document.body.dataset.ready = "yes";
}

document.addEventListener("DOMContentLoaded", start);
