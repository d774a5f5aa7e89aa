// The render page: upload a stem, choose the settings, follow the renders, read reports.
//
// Plain ES module, no build step and no framework; it talks only to the public HTTP API
// (api.js) and draws its pictures and plots as SVG (draw.js).

import { api, ApiError, blobUrl, download, getToken, hooks, setToken, upload } from "./api.js";
import { decayChart, layoutPicture, loudnessChart, roomPicture, spectraChart } from "./draw.js";

const $ = (sel) => document.querySelector(sel);

/** Poll interval while a render is queued or running (ms). */
const POLL_MS = 1000;
/** Volume the preview player starts at (0..1): well below full scale, for the ears. */
const PREVIEW_VOLUME = 0.25;

const state = {
  auth: false,
  layouts: [],
  rooms: [],
  hrtfSets: [],
  stem: null,
  mapping: [],
  mappingEdited: false,
  renders: [],
  selected: new Set(),
  stemNames: new Map(),
  pollTimer: null,
  previewUrl: null,
};

function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === undefined || v === null || v === false) continue;
    if (k === "class") node.className = v;
    else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : String(v));
  }
  for (const c of children) if (c !== null && c !== undefined) node.append(c);
  return node;
}

function say(selector, message, kind = "error") {
  const node = $(selector);
  node.textContent = message || "";
  node.dataset.kind = kind;
}

function fmt(value, digits = 1, unit = "") {
  if (value === null || value === undefined || Number.isNaN(value)) return "n/a";
  return `${Number(value).toFixed(digits)}${unit ? ` ${unit}` : ""}`;
}

function fmtDuration(seconds) {
  const m = Math.floor(seconds / 60);
  const s = seconds - m * 60;
  return m ? `${m} min ${s.toFixed(1)} s` : `${s.toFixed(2)} s`;
}

function fmtBytes(n) {
  if (n >= 1 << 30) return `${(n / (1 << 30)).toFixed(2)} GB`;
  if (n >= 1 << 20) return `${(n / (1 << 20)).toFixed(1)} MB`;
  return `${Math.ceil(n / 1024)} kB`;
}

// ---------------------------------------------------------------- tokens and start-up

function askForToken(reason) {
  const panel = $("#token-panel");
  const wasHidden = panel.hidden;
  panel.hidden = false;
  say("#token-message", getToken() ? reason || "the API token is not valid on this server" : "");
  if (wasHidden) $("#token-input").focus();
}

hooks.unauthorized = (detail) => askForToken(detail);

async function start() {
  let health;
  try {
    health = await api("/v1/health");
  } catch (err) {
    $("#server-status").textContent = `not connected: ${err.message}`;
    return;
  }
  state.auth = Boolean(health.auth);
  $("#server-status").textContent = `connected to earfold ${health.version}` +
    (state.auth ? " (API tokens on)" : "");
  $("#token-forget").hidden = !state.auth;
  if (state.auth && !getToken()) {
    askForToken();
    return;
  }
  await loadCatalog();
}

async function loadCatalog() {
  try {
    const [layouts, rooms, hrtfSets] = await Promise.all([
      api("/v1/layouts"), api("/v1/rooms"), api("/v1/hrtf-sets")]);
    state.layouts = layouts;
    state.rooms = rooms;
    state.hrtfSets = hrtfSets;
  } catch (err) {
    if (!(err instanceof ApiError && err.status === 401)) {
      $("#server-status").textContent = `cannot read the catalogue: ${err.message}`;
    }
    return false;
  }
  $("#token-panel").hidden = true;
  fillRooms();
  fillHrtf();
  if (state.stem) fillLayouts();
  await refreshRenders();
  const linked = REPORT_HASH.exec(window.location.hash);
  if (linked && $("#report-panel").hidden) showReport(linked[1]);
  return true;
}

$("#token-form").addEventListener("submit", async (event) => {
  event.preventDefault();
  setToken($("#token-input").value.trim());
  say("#token-message", "checking…", "info");
  if (await loadCatalog()) {
    $("#token-input").value = "";
    say("#token-message", "");
  }
});

$("#token-forget").addEventListener("click", () => {
  setToken("");
  askForToken();
});

// ---------------------------------------------------------------- 1. the stem

const dropzone = $("#dropzone");
dropzone.addEventListener("click", () => $("#stem-files").click());
dropzone.addEventListener("keydown", (event) => {
  if (event.key === "Enter" || event.key === " ") {
    event.preventDefault();
    $("#stem-files").click();
  }
});
for (const name of ["dragenter", "dragover"]) {
  dropzone.addEventListener(name, (event) => {
    event.preventDefault();
    dropzone.classList.add("over");
  });
}
for (const name of ["dragleave", "drop"]) {
  dropzone.addEventListener(name, () => dropzone.classList.remove("over"));
}
dropzone.addEventListener("drop", (event) => {
  event.preventDefault();
  const files = [...(event.dataTransfer ? event.dataTransfer.files : [])];
  if (files.length) uploadStem(files);
});
$("#stem-files").addEventListener("change", (event) => {
  const files = [...event.target.files];
  if (files.length) uploadStem(files);
  event.target.value = "";
});

async function uploadStem(files) {
  const form = new FormData();
  for (const f of files) form.append("file", f, f.name);
  const total = files.reduce((n, f) => n + f.size, 0);
  $("#upload-row").hidden = false;
  const bar = $("#upload-progress");
  bar.value = 0;
  say("#stem-message", "");
  $("#upload-text").textContent = `0 of ${fmtBytes(total)}`;
  try {
    const stem = await upload("/v1/stems", form, (loaded, all) => {
      bar.value = all ? loaded / all : 0;
      $("#upload-text").textContent = loaded >= (all || total)
        ? "uploaded; reading the file…" : `${fmtBytes(loaded)} of ${fmtBytes(all || total)}`;
    });
    bar.value = 1;
    $("#upload-text").textContent = "done";
    state.stem = stem;
    state.stemNames.set(stem.id, stemName(stem));
    showStem(stem);
  } catch (err) {
    $("#upload-text").textContent = "refused";
    say("#stem-message", `The stem was not accepted: ${err.message}`);
  }
}

function stemName(stem) {
  const files = stem.files || [];
  if (!files.length) return stem.id.slice(0, 8);
  return files.length === 1 ? files[0].name : `${files[0].name} + ${files.length - 1} more`;
}

function showStem(stem) {
  const facts = $("#stem-facts");
  facts.replaceChildren();
  const rows = [
    ["file(s)", (stem.files || []).map((f) => f.name).join(", ")],
    ["format", `${stem.format}${stem.subtype ? `, ${stem.subtype}` : ""}`],
    ["sample rate", `${stem.samplerate} Hz`],
    ["channels", String(stem.channels)],
    ["duration", fmtDuration(stem.duration_s)],
    ["detected labels", stem.channel_labels
      ? `${stem.channel_labels.join(" ")} (from the ${stem.labels_source})` : "none detected"],
    ["suggested layout", stem.suggested_layout || "none; choose one below"],
  ];
  for (const w of stem.warnings || []) rows.push(["warning", w]);
  for (const [k, v] of rows) facts.append(el("dt", {}, k), el("dd", {}, v));
  facts.hidden = false;
  facts.dataset.stemId = stem.id;
  $("#settings-panel").hidden = false;
  state.mappingEdited = false;
  fillLayouts();
}

// ---------------------------------------------------------------- 2. settings

function fillLayouts() {
  const select = $("#layout");
  const stem = state.stem;
  select.replaceChildren();
  for (const layout of state.layouts) {
    const n = layout.speakers.length;
    const fits = !stem || n === stem.channels;
    select.append(el("option", { value: layout.name, disabled: !fits },
      `${layout.name} (${n} channels)${fits ? "" : " — does not fit"}`));
  }
  const suggested = stem && state.layouts.find((l) => l.name === stem.suggested_layout);
  const firstFit = state.layouts.find((l) => !stem || l.speakers.length === stem.channels);
  const chosen = suggested || firstFit;
  if (chosen) select.value = chosen.name;
  say("#layout-note", chosen ? "" : `No built-in layout has ${stem.channels} channels.`, "info");
  $("#render-button").disabled = !chosen;
  layoutChanged();
}

function currentLayout() {
  return state.layouts.find((l) => l.name === $("#layout").value) || null;
}

function layoutChanged() {
  const layout = currentLayout();
  const box = $("#layout-picture");
  box.replaceChildren();
  if (!layout) return;
  box.append(layoutPicture(layout));
  $("#layout-note").textContent = `${layout.description || layout.name}` +
    (layout.source ? ` · ${layout.source}` : "");
  state.mappingEdited = false;
  state.mapping = defaultMapping(layout);
  drawMapping(layout);
}
$("#layout").addEventListener("change", layoutChanged);

function defaultMapping(layout) {
  const labels = layout.speakers.map((s) => s.label);
  const detected = state.stem && state.stem.channel_labels;
  if (detected && detected.length === labels.length) {
    const canon = detected.map((d) => labels.find((l) => l.toLowerCase() === String(d).toLowerCase()));
    if (canon.every(Boolean) && new Set(canon).size === canon.length) {
      $("#mapping-source").textContent = `(detected from the ${state.stem.labels_source})`;
      return canon;
    }
  }
  $("#mapping-source").textContent = "(the layout's default order)";
  return labels.slice();
}

function drawMapping(layout) {
  const body = $("#mapping tbody");
  body.replaceChildren();
  const labels = layout.speakers.map((s) => s.label);
  state.mapping.forEach((label, i) => {
    const id = `map-${i}`;
    const select = el("select", { id, "data-channel": i });
    for (const l of labels) select.append(el("option", { value: l }, l));
    select.value = label;
    select.addEventListener("change", () => {
      state.mapping[i] = select.value;
      state.mappingEdited = true;
      $("#mapping-source").textContent = "(edited)";
      checkMapping();
    });
    body.append(el("tr", {}, el("th", { scope: "row" }, el("label", { for: id }, `channel ${i + 1}`)),
      el("td", {}, select)));
  });
  checkMapping();
}

function checkMapping() {
  const seen = new Map();
  const dup = [];
  state.mapping.forEach((l) => { seen.set(l, (seen.get(l) || 0) + 1); });
  for (const [l, n] of seen) if (n > 1) dup.push(l);
  say("#mapping-message", dup.length ? `Each loudspeaker once: ${dup.join(", ")} is used more than once.` : "");
  return dup.length === 0;
}

$("#mapping-reset").addEventListener("click", () => {
  const layout = currentLayout();
  if (!layout) return;
  state.mappingEdited = false;
  state.mapping = defaultMapping(layout);
  drawMapping(layout);
});

function fillRooms() {
  const select = $("#room");
  const keep = select.value;
  select.replaceChildren();
  for (const room of state.rooms) {
    const label = room.name === "none" ? "none (anechoic: the HRTF set only)"
      : `${room.name}${room.description ? ` — ${room.description}` : ""}`;
    select.append(el("option", { value: room.name }, label));
  }
  select.value = keep && state.rooms.some((r) => r.name === keep) ? keep : "none";
  roomChanged();
}

function roomChanged() {
  const room = state.rooms.find((r) => r.name === $("#room").value);
  const pic = $("#room-picture");
  const table = $("#room-figures");
  pic.replaceChildren();
  table.replaceChildren();
  if (!room || !room.dimensions_m) return;
  const drawing = roomPicture(room);
  if (drawing) pic.append(drawing);
  const d = room.dimensions_m;
  const rt = room.rt60_target_s || (room.rt60_used === "sabine" ? room.rt60_sabine_s : room.rt60_eyring_s) || [];
  table.append(el("caption", {}, `Room ${room.name}`));
  table.append(el("tr", {}, el("th", { scope: "row" }, "size"), el("td", {},
    `${d.length} × ${d.width} × ${d.height} m, ${fmt(room.volume_m3, 0)} m³`)));
  table.append(el("tr", {}, el("th", { scope: "row" }, "loudspeakers at"), el("td", {}, `${room.speaker_radius_m} m`)));
  if (room.bands_hz && rt.length) {
    const bands = room.bands_hz.map((b) => (b >= 1000 ? `${b / 1000}k` : `${b}`)).join(" / ");
    table.append(el("tr", {}, el("th", { scope: "row" }, "RT60 (s)"),
      el("td", {}, `${rt.map((t) => fmt(t, 2)).join(" / ")} at ${bands} Hz`)));
  }
  if (room.mixing_time_ms) {
    table.append(el("tr", {}, el("th", { scope: "row" }, "mixing time"), el("td", {}, `${fmt(room.mixing_time_ms, 1)} ms`)));
  }
}
$("#room").addEventListener("change", roomChanged);

function fillHrtf(selectId) {
  const select = $("#hrtf");
  const keep = selectId || select.value;
  select.replaceChildren();
  for (const set of state.hrtfSets) {
    const label = set.kind === "shipped" ? `${set.name}${set.default ? " (default)" : ""} — ${set.title || ""}`
      : `uploaded: ${set.name}`;
    select.append(el("option", { value: set.id }, label));
  }
  const def = state.hrtfSets.find((s) => s.default);
  select.value = keep && state.hrtfSets.some((s) => s.id === keep) ? keep : def ? def.id : "";
  hrtfChanged();
}

function hrtfChanged() {
  const set = state.hrtfSets.find((s) => s.id === $("#hrtf").value);
  $("#hrtf-note").textContent = !set ? "" : set.kind === "shipped"
    ? `${set.description || ""} ${set.citation ? `Source: ${set.citation}.` : ""}`
    : `${set.measurements ?? "?"} measurements, ${set.samplerate ?? "?"} Hz${set.convention ? `, ${set.convention}` : ""}`;
}
$("#hrtf").addEventListener("change", hrtfChanged);

$("#sofa-file").addEventListener("change", async (event) => {
  const file = event.target.files[0];
  event.target.value = "";
  if (!file) return;
  const form = new FormData();
  form.append("file", file, file.name);
  say("#sofa-message", `checking ${file.name}…`, "info");
  try {
    const set = await upload("/v1/hrtf-sets", form);
    state.hrtfSets = await api("/v1/hrtf-sets");
    fillHrtf(set.id);
    say("#sofa-message", `${file.name} accepted and selected.`, "ok");
  } catch (err) {
    say("#sofa-message", `${file.name} was refused: ${err.message}`);
  }
});

function loudnessModeChanged() {
  $("#loudness").disabled = $("#loudness-mode").value !== "target";
}
$("#loudness-mode").addEventListener("change", loudnessModeChanged);
$("#limiter").addEventListener("change", () => {
  const on = $("#limiter").checked;
  $("#true-peak").disabled = !on;
  $("#limiter-warning").hidden = on;
});

function renderRequest() {
  const layout = currentLayout();
  const [format, subtype] = $("#format").value.split(":");
  const body = {
    stem_id: state.stem.id,
    layout: layout.name,
    room: $("#room").value || "none",
    format,
    subtype,
  };
  const hrtf = $("#hrtf").value;
  if (hrtf) body.hrtf = hrtf;
  const mode = $("#loudness-mode").value;
  body.loudness = mode === "target" ? Number($("#loudness").value) : mode;
  body.true_peak = $("#limiter").checked ? Number($("#true-peak").value) : "off";
  if (state.mappingEdited) body.channel_order = state.mapping.slice();
  return body;
}

$("#render-form").addEventListener("submit", async (event) => {
  event.preventDefault();
  if (!state.stem || !currentLayout()) return;
  if (!checkMapping()) {
    $("#mapping-box").open = true;
    return;
  }
  const button = $("#render-button");
  button.disabled = true;
  say("#render-message", "queueing…", "info");
  try {
    const job = await api("/v1/renders", { method: "POST", json: renderRequest() });
    say("#render-message", `Render queued (${job.id.slice(0, 8)}); follow it below.`, "ok");
    await refreshRenders();
  } catch (err) {
    say("#render-message", `The render was not queued: ${err.message}`);
  } finally {
    button.disabled = false;
  }
});

// ---------------------------------------------------------------- 3. renders

function summary(req) {
  const parts = [typeof req.layout === "string" ? req.layout : "custom layout"];
  if (req.room && req.room !== "none") parts.push(`room ${req.room}`);
  const set = state.hrtfSets.find((s) => s.id === req.hrtf);
  parts.push(set ? set.name : req.hrtf || "default HRTF");
  if (req.loudness !== null && req.loudness !== undefined) {
    parts.push(typeof req.loudness === "number" ? `${req.loudness} LUFS` : `loudness ${req.loudness}`);
  }
  if (req.true_peak === "off") parts.push("limiter off");
  else if (typeof req.true_peak === "number") parts.push(`${req.true_peak} dBTP`);
  parts.push(`${req.format || "wav"} ${req.subtype || ""}`.trim());
  return parts.join(" · ");
}

async function stemLabel(stemId) {
  if (!state.stemNames.has(stemId)) {
    state.stemNames.set(stemId, stemId.slice(0, 8));
    try {
      state.stemNames.set(stemId, stemName(await api(`/v1/stems/${stemId}`)));
    } catch {
      state.stemNames.set(stemId, `${stemId.slice(0, 8)} (deleted)`);
    }
  }
  return state.stemNames.get(stemId);
}

let refreshing = null;
let refreshAgain = false;

/** Refresh the list; calls while one is in flight fold into one more after it. */
function refreshRenders() {
  if (refreshing) {
    refreshAgain = true;
    return refreshing;
  }
  refreshing = fetchRenders().finally(() => {
    refreshing = null;
    if (refreshAgain) {
      refreshAgain = false;
      refreshRenders();
    }
  });
  return refreshing;
}

async function fetchRenders() {
  clearTimeout(state.pollTimer);
  try {
    state.renders = await api("/v1/renders?limit=100");
  } catch (err) {
    if (!(err instanceof ApiError && err.status === 401)) {
      say("#renders-message", `Cannot list the renders: ${err.message}`);
      state.pollTimer = setTimeout(refreshRenders, POLL_MS * 5);
    }
    return;
  }
  if ($("#renders-message").textContent.startsWith("Cannot list")) say("#renders-message", "");
  await drawRenders();
  if (state.renders.some((r) => r.state === "queued" || r.state === "running")) {
    state.pollTimer = setTimeout(refreshRenders, POLL_MS);
  }
}

function actionButton(name, text, handler) {
  return el("button", { type: "button", class: `secondary act-${name}`, "data-action": name, onclick: handler }, text);
}

async function drawRenders() {
  const body = $("#renders tbody");
  $("#renders").hidden = state.renders.length === 0;
  $("#renders-empty").hidden = state.renders.length > 0;
  const ids = new Set(state.renders.map((r) => r.id));
  for (const row of [...body.rows]) if (!ids.has(row.dataset.id)) row.remove();
  for (const id of [...state.selected]) if (!ids.has(id)) state.selected.delete(id);
  let previous = null;
  for (const r of state.renders) {
    let row = body.querySelector(`tr[data-id="${r.id}"]`);
    const stemId = r.request.stem_id;
    if (!row) {
      const box = el("input", { type: "checkbox", id: `sel-${r.id}`, "data-id": r.id });
      box.addEventListener("change", () => {
        if (box.checked) state.selected.add(r.id); else state.selected.delete(r.id);
        updateCompare();
      });
      const progress = el("progress", { max: 1, value: 0, "aria-label": "progress" });
      const actions = el("td", { class: "actions" },
        actionButton("report", "Report", () => showReport(r.id)),
        actionButton("download", "Download", () => downloadRender(r.id)),
        actionButton("cancel", "Cancel", () => removeRender(r.id, "cancel")),
        actionButton("delete", "Delete", () => removeRender(r.id, "delete")));
      row = el("tr", { "data-id": r.id },
        el("td", {}, box, el("label", { for: `sel-${r.id}`, class: "visually-hidden" }, `select render ${r.id.slice(0, 8)}`)),
        el("td", { class: "stem-name" }, stemId.slice(0, 8)),
        el("td", { class: "settings" }),
        el("td", { class: "state" }, el("span", { class: "state-text" }), progress, el("span", { class: "state-message" })),
        actions);
      stemLabel(stemId).then((name) => { row.querySelector(".stem-name").textContent = name; });
    }
    // Keep rows in the server's order (newest first) without rebuilding them, so that
    // keyboard focus stays on the button it was on.
    if (previous ? previous.nextSibling !== row : body.firstChild !== row) {
      if (previous) previous.after(row); else body.prepend(row);
    }
    previous = row;
    row.dataset.state = r.state;
    row.querySelector(".settings").textContent = summary(r.request);
    const pct = Math.round(r.progress * 100);
    row.querySelector(".state-text").textContent = r.state === "running" ? `running ${pct} %` : r.state;
    const bar = row.querySelector("progress");
    bar.value = r.state === "done" ? 1 : r.progress;
    bar.hidden = r.state !== "running" && r.state !== "queued";
    bar.setAttribute("aria-label", `progress of render ${r.id.slice(0, 8)}`);
    row.querySelector(".state-message").textContent = r.message ? ` ${r.message}` : "";
    const active = r.state === "queued" || r.state === "running";
    row.querySelector(".act-report").hidden = r.state !== "done";
    row.querySelector(".act-download").hidden = r.state !== "done";
    row.querySelector(".act-cancel").hidden = !active;
    row.querySelector(".act-delete").hidden = active;
  }
  updateCompare();
}

async function downloadRender(id) {
  say("#renders-message", "");
  try {
    const got = await download(`/v1/renders/${id}/audio`, `render-${id.slice(0, 8)}.wav`);
    say("#renders-message", `Saved ${got.name} (${fmtBytes(got.size)}).`, "ok");
  } catch (err) {
    say("#renders-message", `The download failed: ${err.message}`);
  }
}

async function removeRender(id, how) {
  if (how === "delete" && !window.confirm("Delete this render and its file?")) return;
  try {
    await api(`/v1/renders/${id}`, { method: "DELETE" });
  } catch (err) {
    say("#renders-message", `Could not ${how} the render: ${err.message}`);
  }
  if (how === "delete" && $("#report-panel").dataset.id === id) {
    $("#report-panel").hidden = true;
    history.replaceState(null, "", window.location.pathname);
  }
  await refreshRenders();
}

// ---------------------------------------------------------------- blind comparison

function updateCompare() {
  const chosen = state.renders.filter((r) => state.selected.has(r.id));
  const stems = new Set(chosen.map((r) => r.request.stem_id));
  const button = $("#compare-button");
  let why = "";
  if (chosen.length < 2) why = "Select at least two renders.";
  else if (chosen.length > 8) why = "Select at most eight renders.";
  else if (stems.size > 1) why = "The selected renders must be of the same stem.";
  else if ($("#compare-mode").value === "abx" && chosen.length !== 2) why = "ABX compares exactly two renders.";
  button.disabled = Boolean(why);
  button.title = why;
  if (chosen.length) say("#compare-message", why, "info");
}
$("#compare-mode").addEventListener("change", updateCompare);

/**
 * Render options that shape the sound, the ones a comparison variant takes. Loudness, the
 * limiter and the file format are left out: the comparison level-matches the variants
 * itself and plays them in the browser.
 */
const VARIANT_FIELDS = ["layout", "channel_order", "hrtf", "room", "seed", "block_size"];

/** A comparison variant from a render request: its sound options and a readable name. */
function variantOf(request) {
  const out = {};
  for (const k of VARIANT_FIELDS) {
    if (request[k] !== null && request[k] !== undefined) out[k] = request[k];
  }
  const set = state.hrtfSets.find((s) => s.id === request.hrtf);
  const layout = typeof request.layout === "string" ? request.layout : "custom layout";
  out.name = `${layout} · room ${request.room || "none"} · ${set ? set.name : request.hrtf || "default HRTF"}`.slice(0, 64);
  return out;
}

$("#compare-button").addEventListener("click", async () => {
  const chosen = state.renders.filter((r) => state.selected.has(r.id)).reverse(); // oldest first
  if (chosen.length < 2) return;
  const body = {
    stem_id: chosen[0].request.stem_id,
    variants: chosen.map((r) => variantOf(r.request)),
    mode: $("#compare-mode").value,
    trials: Number($("#compare-trials").value),
    excerpt: { length: Number($("#compare-length").value) },
  };
  say("#compare-message", "preparing the comparison…", "info");
  try {
    const made = await api("/v1/comparisons", { method: "POST", json: body });
    const page = (made.links && made.links.page) || `/compare/${made.id}`;
    const msg = $("#compare-message");
    msg.dataset.kind = "ok";
    msg.replaceChildren("Comparison started: ", el("a", { href: page, id: "compare-link" }, "open the listening page"),
      ` (${made.state}).`);
    window.open(page, "_blank", "noopener");
  } catch (err) {
    if (err instanceof ApiError && (err.status === 404 || err.status === 405)) {
      say("#compare-message", "Blind comparisons are not available on this server yet " +
        `(POST /v1/comparisons answered ${err.status}).`);
    } else {
      say("#compare-message", `The comparison was not started: ${err.message}`);
    }
  }
});

// ---------------------------------------------------------------- the report

function factTable(caption, rows) {
  const table = el("table", { class: "figures" }, el("caption", {}, caption));
  for (const [k, v] of rows) table.append(el("tr", {}, el("th", { scope: "row" }, k), el("td", {}, v)));
  return table;
}

/** Address of a report view: /#report=ID, so that a report can be bookmarked or shared. */
const REPORT_HASH = /^#report=([0-9a-f]{32})$/;

async function showReport(id) {
  if (window.location.hash !== `#report=${id}`) history.replaceState(null, "", `#report=${id}`);
  const panel = $("#report-panel");
  const body = $("#report-body");
  panel.hidden = false;
  panel.dataset.id = id;
  body.replaceChildren(el("p", { class: "note" }, "loading…"));
  let report;
  try {
    report = await api(`/v1/renders/${id}/report`);
  } catch (err) {
    body.replaceChildren(el("p", { class: "message", role: "alert" }, `The report cannot be read: ${err.message}`));
    return;
  }
  body.replaceChildren();
  const d = report.delivery;
  const out = report.output || {};
  const inp = report.input || {};
  body.append(el("div", { class: "columns" },
    factTable("Input and output", [
      ["stem", (inp.files || []).join(", ")],
      ["input", `${inp.channels} channels, ${inp.samplerate} Hz, ${fmtDuration(inp.duration_s || 0)}`],
      ["layout", `${report.layout.name} · channel order ${report.channel_order.labels.join(" ")} (${report.channel_order.source})`],
      ["HRTF set", `${report.hrtf.name} (${report.hrtf.measurements} measurements)`],
      ["room", report.room ? (report.room.room ? report.room.room.name : report.room.requested || "measured") : "none"],
      ["output", `${out.file} · ${out.format} ${out.subtype} · ${out.channels} channels · ${fmtDuration(out.frames / out.samplerate)}`],
      ["speed", `${fmt(report.timings_s.x_real_time, 0)} × real time`],
    ]),
    d ? factTable("Delivery", [
      ["target", d.target === "match" ? `the stem's own loudness (${fmt(d.target_lufs, 1, "LUFS")})`
        : d.target_lufs === null ? "none (no gain)" : fmt(d.target_lufs, 1, "LUFS")],
      ["integrated loudness", `${fmt(d.render_integrated_lufs, 1)} → ${fmt(d.output.integrated_lufs, 1, "LUFS")} (gain ${fmt(d.gain_db, 1, "dB")})`],
      ["loudness range", fmt(d.output.loudness_range_lu, 1, "LU")],
      ["max momentary / short-term", `${fmt(d.output.momentary_max_lufs, 1)} / ${fmt(d.output.short_term_max_lufs, 1, "LUFS")}`],
      ["true peak", `${fmt(d.true_peak_before_dbtp, 1)} → ${fmt(d.true_peak_after_dbtp, 1, "dBTP")}`],
      ["limiter", d.limiter.enabled ? `ceiling ${d.ceiling_dbtp} dBTP, up to ${fmt(d.limiter.max_gain_reduction_db, 1, "dB")} reduction` : "off"],
    ]) : factTable("Delivery", [["", "no loudness gain and no limiter"]])));
  const measured = report.room && report.room.rt60_measured;
  if (measured) {
    const bands = measured.bands_hz.map((b) => (b >= 1000 ? `${b / 1000}k` : `${b}`));
    body.append(factTable("Room reverberation (measured back from the rendered response)", [
      ["bands (Hz)", bands.join(" / ")],
      ["RT60 asked (s)", (report.room.rt60_requested_s || []).map((t) => fmt(t, 2)).join(" / ")],
      ["T20 (s)", measured.t20_s.map((t) => fmt(t, 2)).join(" / ")],
      ["EDT (s)", measured.edt_s.map((t) => fmt(t, 2)).join(" / ")],
    ]));
  }
  if ((report.warnings || []).length) {
    body.append(el("h3", {}, "Warnings"), el("ul", { class: "warnings" }, ...report.warnings.map((w) => el("li", {}, w))));
  }
  const plots = report.plots;
  const charts = el("div", { class: "charts" });
  if (plots) {
    for (const chart of [loudnessChart(plots.loudness), spectraChart(plots.spectra), decayChart(plots.room_decay)]) {
      if (chart) charts.append(el("figure", {}, chart));
    }
  } else {
    charts.append(el("p", { class: "note" }, "This report has no plot data (made by an older version)."));
  }
  body.append(charts);
  const player = el("div", { class: "player" },
    el("p", { class: "caution", role: "note" }, "Hearing caution: the preview starts at a quarter of full volume. " +
      "Set your headphone level low before you press play."),
    el("button", { type: "button", class: "secondary", id: "preview-button", onclick: () => preview(id, player) }, "Load the preview"));
  body.append(player);
  panel.focus();
}

async function preview(id, box) {
  if (state.previewUrl) URL.revokeObjectURL(state.previewUrl);
  try {
    state.previewUrl = await blobUrl(`/v1/renders/${id}/audio`);
  } catch (err) {
    box.append(el("p", { class: "message", role: "alert" }, `The preview cannot be loaded: ${err.message}`));
    return;
  }
  const audio = el("audio", { controls: true, src: state.previewUrl, "aria-label": "preview of the render" });
  audio.volume = PREVIEW_VOLUME;
  box.querySelector("#preview-button").remove();
  box.append(audio);
}

loudnessModeChanged();
start();
