// The stems library (left column of the desk): every stem the token owns (GET /v1/stems),
// its probe, select, delete (with an inline confirmation), upload by drop or button with
// progress and cancel, and the selected stem's per-channel levels
// (GET /v1/stems/{id}/levels) as one compact strip per channel.
//
// The selection survives a reload: the stem id is kept in the URL hash (desk.js writes it
// on "stem-selected") and in localStorage; the stem itself comes from the server, so a
// reload never asks for the file again.
//
// Exports mountStems(el) and stemName(stem) (the name the desk shows for a stem).

import { api, upload } from "./api.js";
import { bus } from "./bus.js";
import { el, fmtDb, fmtRate, fmtSeconds, cssVar, onThemeChange } from "./dom.js";
import { readHash } from "./hash.js";

const LAST_KEY = "earfold.stem";
// Markers on a channel strip (our thresholds, chosen for a glance, not a measurement):
// a main channel with more than 60 % of its energy below 120 Hz carries LFE-like content;
// an LFE channel with more than 10 % of its energy above 120 Hz carries full-range content.
const LOW_IN_MAIN = 0.6;
const HIGH_IN_LFE = 0.1;
const FLOOR_DB = -72;

const ui = {};
let stems = [];
let selectedId = "";
let uploading = null;

/** The name shown for a stem: its file name, or the common part of its mono files' names. */
export function stemName(stem) {
  if (!stem) return "";
  const files = (stem.files || []).map((f) => f.name).filter(Boolean);
  if (files.length === 0) return `stem ${String(stem.id || "").slice(0, 8)}`;
  if (files.length === 1) return files[0];
  let prefix = files[0];
  for (const name of files) while (!name.startsWith(prefix)) prefix = prefix.slice(0, -1);
  prefix = prefix.replace(/[._\-\s]+$/, "");
  return prefix ? `${prefix} (${files.length} files)` : `${files[0]} + ${files.length - 1}`;
}

function labelsText(stem) {
  const labels = stem.channel_labels;
  if (!labels || labels.length === 0) return "no labels found";
  return labels.join(" ");
}

function rowFor(stem) {
  const selected = stem.id === selectedId;
  const del = el("button", { type: "button", class: "btn btn-quiet btn-small stem-delete",
    "aria-label": `Delete ${stemName(stem)}`, onclick: (e) => { e.stopPropagation(); askDelete(stem, item); } }, "Delete");
  const pick = el("button", { type: "button", class: "stem-pick", "aria-pressed": selected ? "true" : "false",
    onclick: () => select(stem.id) },
    el("span", { class: "stem-name", text: stemName(stem) }),
    el("span", { class: "stem-facts" },
      el("span", { class: "chip", text: `${stem.channels} ch` }),
      el("span", { class: "chip", text: fmtRate(stem.samplerate) }),
      el("span", { class: "chip", text: fmtSeconds(stem.duration_s) }),
      // An ADM master needs no layout: its metadata places every track.
      stem.adm
        ? el("span", { class: "chip note", "data-part": "adm-chip", title: "an ADM object master: its metadata places every track",
          text: `ADM · ${stem.adm.objects} object${stem.adm.objects === 1 ? "" : "s"}` })
        : stem.suggested_layout
          ? el("span", { class: "chip note", title: "suggested layout", text: stem.suggested_layout })
          : el("span", { class: "chip warn", text: "no layout suggested" }),
      // Only a hint: the Settings tab offers the scene as a one-click choice.
      stem.scene_hint
        ? el("span", { class: "chip", "data-part": "scene-hint", title: "the channel count of an Ambisonic scene; choose it under Settings",
          text: `or ${stem.scene_hint.layout}?` })
        : null),
    el("span", { class: "stem-labels muted", text: labelsText(stem) }));
  const item = el("li", { class: `stem-row${selected ? " selected" : ""}`, "data-stem": stem.id }, pick,
    el("div", { class: "stem-actions" }, del));
  return item;
}

function askDelete(stem, item) {
  const actions = item.querySelector(".stem-actions");
  const keep = el("button", { type: "button", class: "btn btn-small", onclick: () => actions.replaceChildren(
    el("button", { type: "button", class: "btn btn-quiet btn-small stem-delete", "aria-label": `Delete ${stemName(stem)}`,
      onclick: (e) => { e.stopPropagation(); askDelete(stem, item); } }, "Delete")) }, "Keep");
  const yes = el("button", { type: "button", class: "btn btn-small stem-delete-yes", onclick: () => remove(stem) },
    "Delete stem");
  actions.replaceChildren(el("span", { class: "hint", text: "Delete the stem and its files?" }), yes, keep);
  yes.focus();
}

async function remove(stem) {
  try {
    await api(`/v1/stems/${stem.id}`, { method: "DELETE" });
    bus.emit("notify", { message: `Deleted ${stemName(stem)}.`, kind: "ok" });
    if (stem.id === selectedId) select("");
    await refresh();
    bus.emit("stems-changed", {});
  } catch (err) {
    bus.emit("notify", { message: `Could not delete ${stemName(stem)}: ${err.message}`, kind: "error" });
  }
}

function drawList() {
  ui.list.replaceChildren(...stems.map(rowFor));
  ui.empty.hidden = stems.length > 0;
}

async function refresh() {
  try {
    const got = await api("/v1/stems");
    stems = (Array.isArray(got) ? got : got.items || []).slice()
      .sort((a, b) => String(b.created || "").localeCompare(String(a.created || "")));
    ui.listMessage.hidden = true;
  } catch (err) {
    ui.listMessage.hidden = false;
    ui.listMessage.textContent = `The stems cannot be listed: ${err.message}`;
  }
  drawList();
  return stems;
}

function select(id) {
  selectedId = id || "";
  if (selectedId) localStorage.setItem(LAST_KEY, selectedId);
  else localStorage.removeItem(LAST_KEY);
  for (const row of ui.list.querySelectorAll(".stem-row")) {
    const on = row.dataset.stem === selectedId;
    row.classList.toggle("selected", on);
    row.querySelector(".stem-pick").setAttribute("aria-pressed", on ? "true" : "false");
  }
  const stem = stems.find((s) => s.id === selectedId) || null;
  bus.emit("stem-selected", { stem });
  showLevels(stem);
}

// ---- levels ----

let levelsToken = 0;
let lastLevels = null;

async function showLevels(stem) {
  const token = ++levelsToken;
  lastLevels = null;
  ui.levels.replaceChildren();
  ui.levelsBox.hidden = !stem;
  if (!stem) return;
  ui.levelsTitle.textContent = `Levels · ${stemName(stem)}`;
  ui.levels.append(el("p", { class: "hint", text: "Measuring…" }));
  let levels;
  try {
    levels = await api(`/v1/stems/${stem.id}/levels`);
  } catch (err) {
    if (token !== levelsToken) return;
    const missing = (err.status === 404 && /no such resource|Not Found/.test(err.message)) || err.status === 405;
    ui.levels.replaceChildren(el("p", { class: missing ? "note" : "error", id: "levels-message",
      text: missing ? "This server does not measure channel levels yet."
        : `Channel levels are not available: ${err.message}` }));
    return;
  }
  if (token !== levelsToken) return;
  lastLevels = { levels, stem };
  drawLevels();
}

function channelMarks(ch, isLfe) {
  const marks = [];
  if (ch.peak_dbfs === null || ch.peak_dbfs === undefined) marks.push(["silent", "warn", "no signal in this channel"]);
  else if (isLfe && ch.low_share !== null && ch.low_share !== undefined && 1 - ch.low_share > HIGH_IN_LFE) {
    marks.push(["full range", "warn",
      `${Math.round((1 - ch.low_share) * 100)} % of the energy is above 120 Hz in the LFE channel`]);
  } else if (!isLfe && ch.low_share !== null && ch.low_share !== undefined && ch.low_share > LOW_IN_MAIN) {
    marks.push(["LFE-like", "note",
      `${Math.round(ch.low_share * 100)} % of the energy is below 120 Hz in a main channel`]);
  }
  return marks;
}

/** Loudspeakers of the stem's suggested layout in file order (the layout's default order). */
function layoutSpeakers(stem) {
  const layouts = bus.state.catalog.layouts;
  const list = Array.isArray(layouts) ? layouts : (layouts && layouts.layouts) || [];
  const layout = list.find((l) => l.name === stem.suggested_layout);
  return layout && layout.speakers.length === stem.channels ? layout.speakers : [];
}

function drawLevels() {
  if (!lastLevels) return;
  const { levels, stem } = lastLevels;
  const speakers = layoutSpeakers(stem);
  const rows = (levels.channels || []).map((ch) => {
    const fromLayout = speakers[ch.index];
    const label = ch.label || (stem.channel_labels && stem.channel_labels[ch.index]) ||
      (fromLayout && fromLayout.label) || `ch ${ch.index + 1}`;
    const isLfe = /^LFE/i.test(label) || Boolean(fromLayout && fromLayout.lfe && !ch.label);
    const canvas = el("canvas", { class: "level-overview", width: 240, height: 22,
      role: "img", "aria-label": `overview of ${label}: peak and RMS over the stem` });
    paintOverview(canvas, ch.overview || []);
    const marks = channelMarks(ch, isLfe);
    return el("li", { class: "level-row", "data-channel": ch.index, "data-label": label },
      el("span", { class: "level-label mono", text: label }),
      canvas,
      el("span", { class: "level-figures mono", title: "peak / RMS (dBFS)" },
        `${fmtDb(ch.peak_dbfs)} / ${fmtDb(ch.rms_dbfs)}`),
      el("span", { class: "level-marks" },
        marks.map(([text, kind, why]) => el("span", { class: `chip ${kind} level-mark`, title: why, "data-mark": text }, text))));
  });
  ui.levels.replaceChildren(
    el("p", { class: "hint" }, "peak / RMS in dBFS; the strip shows peak (light) and RMS (dark) over the whole stem"),
    el("ul", { class: "levels-list" }, rows));
}

function paintOverview(canvas, points) {
  const ctx = canvas.getContext("2d");
  const w = canvas.width;
  const h = canvas.height;
  ctx.clearRect(0, 0, w, h);
  ctx.fillStyle = cssVar("--surface-2");
  ctx.fillRect(0, 0, w, h);
  if (!points.length) return;
  const bar = w / points.length;
  const y = (db) => (db === null || db === undefined ? 0 : Math.max(0, Math.min(1, (db - FLOOR_DB) / -FLOOR_DB)) * h);
  ctx.globalAlpha = 0.45;
  ctx.fillStyle = cssVar("--series-1");
  points.forEach(([peak], i) => { const v = y(peak); ctx.fillRect(i * bar, h - v, Math.max(1, bar), v); });
  ctx.globalAlpha = 1;
  points.forEach(([, rms], i) => { const v = y(rms); ctx.fillRect(i * bar, h - v, Math.max(1, bar), v); });
}

// ---- upload ----

async function sendFiles(files) {
  if (!files || files.length === 0) return;
  if (uploading) {
    bus.emit("notify", { message: "An upload is already running; cancel it or wait for it.", kind: "warn" });
    return;
  }
  const form = new FormData();
  for (const f of files) form.append("file", f, f.name);
  const controller = new AbortController();
  uploading = controller;
  ui.uploadRow.hidden = false;
  ui.progress.value = 0;
  ui.uploadText.textContent = `Sending ${files.length === 1 ? files[0].name : `${files.length} files`}…`;
  ui.uploadMessage.hidden = true;
  try {
    const stem = await upload("/v1/stems", form, (loaded, total) => {
      if (total) {
        ui.progress.value = loaded / total;
        ui.uploadText.textContent = `${Math.round((100 * loaded) / total)} % of ${(total / 1e6).toFixed(1)} MB`;
      }
    }, controller.signal);
    ui.uploadRow.hidden = true;
    await refresh();
    select(stem.id);
    bus.emit("stems-changed", {});
    bus.emit("notify", { message: `${stemName(stem)} is ready.`, kind: "ok" });
  } catch (err) {
    ui.uploadRow.hidden = true;
    ui.uploadMessage.hidden = false;
    ui.uploadMessage.className = err.aborted ? "note" : "error";
    ui.uploadMessage.textContent = err.aborted ? "Upload cancelled: nothing was kept." : `The upload was refused: ${err.message}`;
  } finally {
    uploading = null;
    ui.fileInput.value = "";
  }
}

export async function mountStems(root) {
  ui.fileInput = el("input", { type: "file", multiple: true, hidden: true, id: "stem-files",
    accept: "audio/*,.wav,.flac,.w64,.rf64,.aiff,.aif,.caf",
    onchange: () => sendFiles([...ui.fileInput.files]) });
  const addButton = el("button", { type: "button", class: "btn btn-primary", id: "stem-add",
    onclick: () => ui.fileInput.click() }, "Add a stem…");
  ui.drop = el("div", { class: "stem-drop", id: "stem-drop" },
    addButton, ui.fileInput,
    el("p", { class: "hint", text: "or drop one multichannel file, or mono files named by loudspeaker (scene.L.wav, scene.Ls.wav …)" }));
  ui.progress = el("progress", { max: 1, value: 0, id: "upload-progress", "aria-label": "Upload progress" });
  ui.uploadText = el("span", { class: "hint", id: "upload-text", "aria-live": "polite" });
  ui.cancel = el("button", { type: "button", class: "btn btn-small", id: "upload-cancel",
    onclick: () => uploading && uploading.abort() }, "Cancel upload");
  ui.uploadRow = el("div", { class: "upload-row", id: "upload-row", hidden: true }, ui.progress,
    el("div", { class: "toolbar" }, ui.uploadText, ui.cancel));
  ui.uploadMessage = el("p", { id: "upload-message", role: "alert", hidden: true });
  ui.listMessage = el("p", { class: "error", hidden: true, role: "alert" });
  ui.empty = el("p", { class: "hint", id: "stems-empty", text: "No stems yet: add one to start.", hidden: true });
  ui.list = el("ul", { class: "stem-list", id: "stem-list", "aria-label": "Your stems" });
  ui.levelsTitle = el("h3", { text: "Levels" });
  ui.levels = el("div", { id: "stem-levels" });
  ui.levelsBox = el("section", { class: "stem-levels", hidden: true, "aria-label": "Channel levels" },
    ui.levelsTitle, ui.levels);
  root.replaceChildren(ui.drop, ui.uploadRow, ui.uploadMessage, ui.listMessage, ui.empty, ui.list, ui.levelsBox);

  const panel = root.closest(".panel") || root;
  panel.addEventListener("dragover", (e) => { e.preventDefault(); ui.drop.classList.add("over"); });
  panel.addEventListener("dragleave", (e) => { if (!panel.contains(e.relatedTarget)) ui.drop.classList.remove("over"); });
  panel.addEventListener("drop", (e) => {
    e.preventDefault();
    ui.drop.classList.remove("over");
    sendFiles([...(e.dataTransfer ? e.dataTransfer.files : [])]);
  });
  onThemeChange(drawLevels);
  bus.on("catalog-changed", drawLevels);
  bus.on("stems-refresh", async () => {
    await refresh();
    const wanted = selectedId || readHash().stem || localStorage.getItem(LAST_KEY) || "";
    if (wanted && stems.some((s) => s.id === wanted)) select(wanted);
  });

  await refresh();
  const wanted = readHash().stem || localStorage.getItem(LAST_KEY) || "";
  if (wanted && stems.some((s) => s.id === wanted)) select(wanted);
  else if (wanted) {
    localStorage.removeItem(LAST_KEY);
    select("");
  }
}

export function stemsList() {
  return stems;
}
