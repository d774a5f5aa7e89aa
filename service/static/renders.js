// The renders of the selected stem (right column of the desk): GET /v1/renders filtered by
// stem, live progress from the server's event stream GET /v1/renders/events (read with
// fetch streaming so the token header is sent), polling every 1.5 s when the stream fails;
// queue position while queued; output loudness (LUFS) and true peak (dBTP) from the
// render's report; actions per row: play, A/B, solo of one loudspeaker, render again,
// report, download, cancel, delete.
//
// Exports mountRenders(el), renderLoudness(id) (cached { lufs, truePeak } from the report),
// rendersOf(stemId), renderById(id), postRender(request), and describeRequest(request).

import { api, download, tokenHeaders } from "./api.js";
import { bus } from "./bus.js";
import { el, fmtDb } from "./dom.js";

const FINAL = new Set(["done", "failed", "cancelled"]);
const POLL_MS = 1500;
const STREAM_RETRY_MS = 30_000;
const PARENTS_KEY = "earfold.soloParents";

const renders = new Map(); // id -> render view
const rows = new Map(); // id -> row element
const loudness = new Map(); // id -> Promise<{lufs, truePeak}>
const stemNames = new Map(); // stem id -> Promise<string>
const seen = new Map(); // id -> progress values received (test hook)
const live = { source: "none", pollTimer: 0, streamAbort: null };
let abSet = [];
const ui = {};

function soloParents() {
  try {
    return JSON.parse(localStorage.getItem(PARENTS_KEY) || "{}");
  } catch {
    return {};
  }
}

function rememberParent(child, parent) {
  const all = soloParents();
  all[child] = parent;
  const keys = Object.keys(all);
  if (keys.length > 500) delete all[keys[0]];
  localStorage.setItem(PARENTS_KEY, JSON.stringify(all));
}

export function renderById(id) {
  return renders.get(id) || null;
}

export function rendersOf(stemId) {
  return [...renders.values()].filter((r) => r.request && r.request.stem_id === stemId)
    .sort((a, b) => String(b.created).localeCompare(String(a.created)));
}

// Reports are fetched at most REPORTS_AT_ONCE at a time (a long list must not flood the server).
const REPORTS_AT_ONCE = 3;
let reportsRunning = 0;
const reportsWaiting = [];

function limited(task) {
  return new Promise((resolve, reject) => {
    const run = () => {
      reportsRunning += 1;
      task().then(resolve, reject).finally(() => {
        reportsRunning -= 1;
        if (reportsWaiting.length) reportsWaiting.shift()();
      });
    };
    if (reportsRunning < REPORTS_AT_ONCE) run();
    else reportsWaiting.push(run);
  });
}

/** { lufs, truePeak } of a finished render, from its report (fetched once). */
export function renderLoudness(id) {
  if (!loudness.has(id)) {
    const got = limited(() => api(`/v1/renders/${id}/report`)).then((report) => {
      const out = (report.delivery && report.delivery.output) || {};
      return {
        lufs: Number.isFinite(out.integrated_lufs) ? out.integrated_lufs : null,
        truePeak: Number.isFinite(out.true_peak_dbtp) ? out.true_peak_dbtp : null,
      };
    });
    got.catch(() => loudness.delete(id));
    loudness.set(id, got);
  }
  return loudness.get(id);
}

/** The stem's name for a stem id: from the selected stem or GET /v1/stems/{id}, one request per id. */
function stemName(stemId) {
  const stem = bus.state.stem;
  if (stem && stem.id === stemId) return Promise.resolve(nameOf(stem));
  if (!stemNames.has(stemId)) {
    const got = api(`/v1/stems/${stemId}`).then(nameOf, () => "a deleted stem");
    stemNames.set(stemId, got);
  }
  return stemNames.get(stemId);
}

function nameOf(stem) {
  const files = (stem.files || []).map((f) => f.name);
  if (files.length === 1) return files[0];
  return files.length ? `${files[0]} + ${files.length - 1}` : `stem ${stem.id.slice(0, 8)}`;
}

/** Whether a render request is of an ADM master (the chosen stem's upload says so). */
export function isAdmRequest(request = {}) {
  const stem = bus.state.stem;
  return Boolean(request.adm_programme) || Boolean(stem && stem.adm && stem.id === request.stem_id);
}

export function describeRequest(request = {}) {
  const parts = [];
  if (request.fold === "stereo") parts.push("stereo fold-down");
  const layout = isAdmRequest(request)
    ? `ADM master${request.adm_programme ? ` · programme ${request.adm_programme}` : ""}`
    : typeof request.layout === "object" && request.layout
      ? `custom layout${request.layout.name ? ` ${request.layout.name}` : ""}` : request.layout || "layout auto";
  parts.push(layout);
  if (request.fold !== "stereo") {
    const room = typeof request.room === "object" && request.room ? "custom room" : `room ${request.room || "none"}`;
    parts.push(room);
    parts.push(request.hrtf ? `HRTF ${request.hrtf.length === 32 ? request.hrtf.slice(0, 8) : request.hrtf}` : "HRTF default");
  }
  if (request.loudness !== null && request.loudness !== undefined) parts.push(`${request.loudness} LUFS`);
  return parts.join(" · ");
}

export async function postRender(request) {
  const made = await api("/v1/renders", { method: "POST", json: request });
  renders.set(made.id, made);
  refreshView();
  bus.emit("renders-changed", { render: made });
  return made;
}

// ---- rows ----

function stateChip(r) {
  const kind = { done: "ok", failed: "error", cancelled: "warn", running: "note", queued: "note" }[r.state] || "note";
  return el("span", { class: `chip ${kind} render-state`, "data-state": r.state }, r.state);
}

function rowActions(r) {
  const done = r.state === "done";
  const open = !FINAL.has(r.state);
  const inAb = abSet.includes(r.id);
  const actions = [];
  if (done) {
    actions.push(el("button", { type: "button", class: "btn btn-small act-play", title: "Play now (streamed)",
      onclick: () => bus.emit("play", { renderId: r.id }) }, "▶ Play"));
    actions.push(el("button", { type: "button", class: "btn btn-small act-ab", "aria-pressed": inAb ? "true" : "false",
      title: "Add to the A/B switcher or take it out", onclick: () => bus.emit("ab-toggle", { renderId: r.id }) }, "A/B"));
    if (!r.request.solo && r.request.fold !== "stereo") actions.push(soloControl(r));
  }
  actions.push(el("button", { type: "button", class: "btn btn-small btn-quiet act-again", title: "Fill the settings with this render's",
    onclick: () => { bus.emit("settings-load", { request: r.request }); bus.emit("tab-select", { name: "settings" }); } }, "Again"));
  if (done) {
    actions.push(el("a", { class: "btn btn-small btn-quiet act-report", href: `/report/${r.id}`, target: "_blank", rel: "noopener" }, "Report"));
    actions.push(el("button", { type: "button", class: "btn btn-small btn-quiet act-download", onclick: () => save(r) }, "Download"));
  }
  if (open) actions.push(el("button", { type: "button", class: "btn btn-small act-cancel", onclick: () => cancel(r) }, "Cancel"));
  else actions.push(el("button", { type: "button", class: "btn btn-small btn-quiet act-delete", onclick: (e) => askDelete(r, e.target) }, "Delete"));
  return actions;
}

function layoutLabels(r) {
  const req = r.request || {};
  if (req.layout && typeof req.layout === "object") return (req.layout.speakers || []).filter((s) => !s.lfe).map((s) => s.label);
  const name = req.layout || (bus.state.stem && bus.state.stem.suggested_layout);
  const layouts = bus.state.catalog.layouts || [];
  const found = (Array.isArray(layouts) ? layouts : layouts.layouts || []).find((l) => l.name === name);
  return found ? found.speakers.filter((s) => !s.lfe).map((s) => s.label) : [];
}

function soloControl(r) {
  const labels = layoutLabels(r);
  if (!labels.length) return null;
  const select = el("select", { class: "solo-label", "aria-label": "Loudspeaker to hear alone" },
    labels.map((label) => el("option", { value: label }, label)));
  const go = el("button", { type: "button", class: "btn btn-small act-solo", title: "Render this loudspeaker alone, then play it",
    onclick: () => solo(r, select.value) }, "Solo");
  return el("span", { class: "solo-box" }, select, go);
}

async function solo(parent, label) {
  const existing = [...renders.values()].find((x) => x.request && x.request.solo === label &&
    soloParents()[x.id] === parent.id && !["failed", "cancelled"].includes(x.state));
  let child = existing;
  try {
    if (!child) {
      child = await postRender({ ...parent.request, solo: label });
      rememberParent(child.id, parent.id);
      bus.emit("notify", { message: `Rendering ${label} alone…`, kind: "info" });
    }
  } catch (err) {
    bus.emit("notify", { message: `The solo of ${label} was refused: ${err.message}`, kind: "error" });
    return;
  }
  pendingPlay.add(child.id);
  if (child.state === "done") playWhenDone(child);
  else refreshView();
}

const pendingPlay = new Set();

function playWhenDone(r) {
  if (r.state === "done" && pendingPlay.has(r.id)) {
    pendingPlay.delete(r.id);
    bus.emit("play", { renderId: r.id });
  } else if (FINAL.has(r.state)) pendingPlay.delete(r.id);
}

async function save(r) {
  try {
    await download(`/v1/renders/${r.id}/audio`, `render-${r.id.slice(0, 8)}.wav`);
  } catch (err) {
    bus.emit("notify", { message: `Download failed: ${err.message}`, kind: "error" });
  }
}

async function cancel(r) {
  try {
    const view = await api(`/v1/renders/${r.id}`, { method: "DELETE" });
    if (view && view.id) update(view);
  } catch (err) {
    bus.emit("notify", { message: `Could not cancel: ${err.message}`, kind: "error" });
  }
}

function askDelete(r, button) {
  const box = button.parentElement;
  const yes = el("button", { type: "button", class: "btn btn-small act-delete-yes", onclick: () => remove(r) }, "Delete render");
  const no = el("button", { type: "button", class: "btn btn-small btn-quiet", onclick: () => redrawRow(r) }, "Keep");
  box.replaceChildren(el("span", { class: "hint", text: "Delete this render and its file?" }), yes, no);
  yes.focus();
}

async function remove(r) {
  try {
    await api(`/v1/renders/${r.id}`, { method: "DELETE" });
    renders.delete(r.id);
    loudness.delete(r.id);
    bus.emit("ab-remove", { renderId: r.id });
    refreshView();
    bus.emit("renders-changed", {});
  } catch (err) {
    bus.emit("notify", { message: `Could not delete: ${err.message}`, kind: "error" });
  }
}

function title(r) {
  const req = r.request || {};
  if (req.solo) {
    const parentId = soloParents()[r.id];
    const parent = parentId && renders.get(parentId);
    return el("span", { class: "render-title" }, el("span", { class: "chip note", text: `solo ${req.solo}` }), " ",
      parent ? `of ${describeRequest(parent.request)}` : describeRequest({ ...req, solo: null }));
  }
  if (req.fold === "stereo") return el("span", { class: "render-title" }, el("span", { class: "chip", text: "reference" }), " ", describeRequest(req));
  return el("span", { class: "render-title", text: describeRequest(req) });
}

function buildRow(r) {
  const progress = el("progress", { class: "render-progress", max: 1, value: r.progress || 0,
    "aria-label": "Render progress", hidden: r.state !== "running" });
  const queue = el("span", { class: "hint render-queue", hidden: r.state !== "queued" },
    r.queue_position ? `queued: ${r.queue_position === 1 ? "next to start" : `${r.queue_position - 1} ahead`}` : "queued");
  const figures = el("span", { class: "render-figures mono", hidden: r.state !== "done" }, "… LUFS");
  if (r.state === "done") {
    renderLoudness(r.id).then((l) => {
      figures.textContent = `${fmtDb(l.lufs)} LUFS · ${fmtDb(l.truePeak)} dBTP`;
      figures.title = "integrated loudness (ITU-R BS.1770) and true peak of the delivered file";
    }, () => { figures.textContent = "loudness unknown"; });
  }
  const stemLine = el("span", { class: "hint render-stem" });
  if (!bus.state.stem || bus.state.stem.id !== (r.request || {}).stem_id) {
    stemLine.textContent = "…";
    stemName(r.request.stem_id).then((n) => { stemLine.textContent = n; });
  } else stemLine.hidden = true;
  const message = el("p", { class: r.state === "failed" ? "error render-message" : "hint render-message",
    hidden: !r.message || r.state === "done" }, r.message || "");
  return el("li", { class: "render-row", "data-render": r.id, "data-state": r.state },
    el("div", { class: "render-head" }, stateChip(r), title(r)),
    stemLine, progress, queue, figures, message,
    el("div", { class: "render-actions toolbar" }, rowActions(r)));
}

function redrawRow(r) {
  const old = rows.get(r.id);
  const row = buildRow(r);
  rows.set(r.id, row);
  if (old && old.isConnected) old.replaceWith(row);
}

/** What a row shows of a render: an event that changes none of it redraws nothing. */
function signature(r) {
  return JSON.stringify([r.state, r.progress, r.queue_position, r.message, r.result ? 1 : 0]);
}

function update(view) {
  const before = renders.get(view.id);
  renders.set(view.id, view);
  if (!seen.has(view.id)) seen.set(view.id, []);
  seen.get(view.id).push(view.progress);
  const row = rows.get(view.id);
  if (before && signature(before) === signature(view) && row && row.isConnected) return;
  const stem = bus.state.stem;
  const mine = stem && view.request && view.request.stem_id === stem.id;
  if (!row || !row.isConnected) {
    if (mine && !before) refreshView();
  } else if (before && before.state === view.state && view.state === "running") {
    row.querySelector(".render-progress").value = view.progress || 0;
  } else if (before && before.state === view.state && view.state === "queued") {
    const q = row.querySelector(".render-queue");
    q.textContent = view.queue_position
      ? `queued: ${view.queue_position === 1 ? "next to start" : `${view.queue_position - 1} ahead`}` : "queued";
  } else {
    redrawRow(view);
  }
  if (before && before.state !== view.state && FINAL.has(view.state)) bus.emit("renders-changed", { render: view });
  playWhenDone(view);
  schedulePoll();
}

function refreshView() {
  const stem = bus.state.stem;
  const list = stem ? rendersOf(stem.id) : [...renders.values()].sort((a, b) => String(b.created).localeCompare(String(a.created)));
  ui.heading.textContent = stem ? `${list.length} render${list.length === 1 ? "" : "s"} of ${nameOf(stem)}` : "All your renders (no stem selected)";
  ui.empty.hidden = list.length > 0;
  ui.empty.textContent = stem ? "No renders of this stem yet: set the settings and render." : "No renders yet.";
  rows.clear();
  ui.list.replaceChildren(...list.map((r) => { const row = buildRow(r); rows.set(r.id, row); return row; }));
}

async function loadAll() {
  try {
    const list = await api("/v1/renders?limit=500");
    renders.clear();
    for (const r of list) renders.set(r.id, r);
    ui.error.hidden = true;
  } catch (err) {
    ui.error.hidden = false;
    ui.error.textContent = `The renders cannot be listed: ${err.message}`;
  }
  refreshView();
  schedulePoll();
}

// ---- live progress: the event stream, polling when it fails ----

async function stream() {
  if (live.streamAbort) live.streamAbort.abort(); // one stream at a time
  const controller = new AbortController();
  live.streamAbort = controller;
  let response;
  try {
    response = await fetch("/v1/renders/events", { headers: tokenHeaders({ Accept: "text/event-stream" }), signal: controller.signal });
    if (!response.ok || !response.body) throw new Error(`the event stream answered ${response.status}`);
  } catch (err) {
    if (!controller.signal.aborted) streamFailed(err);
    return;
  }
  live.source = "stream";
  ui.live.textContent = "live";
  ui.live.title = "progress pushed by the server (GET /v1/renders/events)";
  const reader = response.body.pipeThrough(new TextDecoderStream()).getReader();
  let buffer = "";
  try {
    for (;;) {
      const { value, done } = await reader.read();
      if (done) break;
      buffer += value.replace(/\r\n?/g, "\n");
      let cut;
      while ((cut = buffer.indexOf("\n\n")) >= 0) {
        const block = buffer.slice(0, cut);
        buffer = buffer.slice(cut + 2);
        handleEvent(block);
      }
    }
    streamFailed(new Error("the event stream ended"));
  } catch (err) {
    if (controller.signal.aborted) return;
    streamFailed(err);
  }
}

function handleEvent(block) {
  let event = "message";
  const data = [];
  for (const line of block.split("\n")) {
    if (line.startsWith(":")) continue;
    const colon = line.indexOf(":");
    const field = colon < 0 ? line : line.slice(0, colon);
    const value = colon < 0 ? "" : line.slice(colon + 1).replace(/^ /, "");
    if (field === "event") event = value;
    else if (field === "data") data.push(value);
  }
  if (event !== "render" || !data.length) return;
  try {
    const view = JSON.parse(data.join("\n"));
    if (view && view.id) update(view);
  } catch (err) {
    console.warn("earfold renders: an event could not be read", err);
  }
}

function streamFailed(err) {
  live.source = "poll";
  live.streamAbort = null;
  ui.live.textContent = "polling";
  ui.live.title = `the event stream is not available (${err.message}); the desk asks every ${POLL_MS / 1000} s`;
  schedulePoll();
  setTimeout(() => { if (live.source === "poll") stream(); }, STREAM_RETRY_MS);
}

function schedulePoll() {
  if (live.source === "stream" || live.pollTimer) return;
  const open = [...renders.values()].filter((r) => !FINAL.has(r.state));
  if (!open.length) return;
  live.pollTimer = setTimeout(async () => {
    live.pollTimer = 0;
    for (const r of [...renders.values()].filter((x) => !FINAL.has(x.state))) {
      try {
        update(await api(`/v1/renders/${r.id}`));
      } catch (err) {
        if (err.status === 404) { renders.delete(r.id); refreshView(); }
      }
    }
    schedulePoll();
  }, POLL_MS);
}

export async function mountRenders(root) {
  ui.heading = el("p", { class: "hint renders-heading", id: "renders-heading" });
  ui.live = el("span", { class: "chip", id: "renders-live", text: "…" });
  ui.error = el("p", { class: "error", role: "alert", hidden: true });
  ui.empty = el("p", { class: "hint", id: "renders-empty", hidden: true });
  ui.list = el("ul", { class: "render-list", id: "render-list", "aria-label": "Renders", "aria-live": "polite" });
  root.replaceChildren(el("div", { class: "toolbar renders-top" }, ui.heading, el("span", { class: "spacer" }), ui.live),
    ui.error, ui.empty, ui.list);
  bus.on("stem-selected", () => refreshView());
  bus.on("renders-changed", ({ render }) => {
    if (render && render.id) {
      if (!renders.has(render.id)) update(render);
    } else loadAll();
  });
  bus.on("renders-refresh", () => {
    loadAll();
    if (live.source !== "stream") stream();
  });
  bus.on("ab-changed", ({ renderIds }) => {
    abSet = renderIds || [];
    for (const [id, row] of rows) {
      const b = row.querySelector(".act-ab");
      if (b) b.setAttribute("aria-pressed", abSet.includes(id) ? "true" : "false");
    }
  });
  bus.on("catalog-changed", () => refreshView());
  window.earfoldDesk = window.earfoldDesk || {};
  window.earfoldDesk.renders = {
    progressSeen: (id) => [...(seen.get(id) || [])],
    source: () => live.source,
    list: () => [...renders.values()],
  };
  await loadAll();
  stream();
}
