// The desk's "Settings" tab: every render setting, built from the server's declaration
// (GET /v1/options, in bus.state.catalog.options), the saved settings presets, the render
// button and the batch (one render per combination of layouts, rooms and HRTF sets).
//
// No range, default or choice list is written here: each field takes its bounds, unit,
// default, choices and help from the declaration, and numbers are checked against the
// declared bounds before anything is sent. Problems the API answers (RFC 9457) are shown
// as sentences beside the field they name.
//
// Events: listens to catalog-changed, stem-selected, settings-load {request},
// presets-changed, layout-use {presetId}; emits renders-changed, notify, catalog-changed
// (after a SOFA upload), tab-select.

import { api, ApiError, upload } from "./api.js";
import { bus } from "./bus.js";
import {
  checkNumber, el, FieldProblem, num, problemsByField, rangeText, sentence, stableJson, uniqueId,
} from "./form-kit.js";
import { createPreset, deletePreset, loadPresets, presetById, presetsOf, presetsState, updatePreset } from "./presets.js";
import { createRoomEditor, roomFigures } from "./room-editor.js";
import { objectPathsPicture, scenePicture } from "./draw.js";

/** Most renders one batch may start at once: enough for a 4 x 3 x 2 grid of candidates,
    few enough that one click cannot flood the queue (a page choice, not a server limit). */
export const BATCH_MAX = 24;

/** How the page names each option (the server's declaration gives the rest). */
const LABELS = {
  layout: "Layout", channel_order: "Channel order", hrtf: "HRTF set", eq: "HRTF set EQ",
  headphone_eq: "Headphone EQ", room: "Room", room_mode: "Room mode", lfe_cutoff: "LFE cutoff",
  lfe_gain: "LFE gain", loudness: "Loudness", true_peak: "True peak", format: "File format",
  subtype: "Sample format", seed: "Seed", block_size: "Block size", excerpt: "Excerpt",
  fold: "Fold to", solo: "Solo loudspeaker", ambisonic_norm: "Normalisation",
  ambisonic_decoder: "Decoder", rotate: "Rotation", adm_programme: "Programme",
};

/** Options only an Ambisonic scene takes, and options only loudspeaker layouts take
    (the server refuses each on the other kind). */
const SCENE_ONLY = ["ambisonic_norm", "ambisonic_decoder", "rotate"];
const SPEAKERS_ONLY = ["channel_order", "fold"];

/** Options a render of an ADM master does not take (its metadata places every track; the
    server refuses each for a master), hidden and not sent for one. */
const NOT_FOR_ADM = ["layout", "channel_order", "solo", "fold", "headphone_eq", ...SCENE_ONLY];

/** Words shown for declared choices that read better with a gloss. */
const CHOICE_WORDS = {
  match: "match the stem's loudness", none: "none", off: "off (no limiter)",
};

/** The panel's sections; options the server declares beyond these land in "More". */
const GROUPS = [
  ["adm", "ADM master", ["adm_programme"]],
  ["speakers", "Loudspeakers", ["layout", "channel_order", "solo"]],
  ["scene", "Ambisonic scene", SCENE_ONLY],
  ["ears", "Ears", ["fold", "hrtf", "eq", "headphone_eq"]],
  ["room", "Room", ["room", "room_mode"]],
  ["lfe", "LFE", ["lfe_cutoff", "lfe_gain"]],
  ["delivery", "Delivery", ["loudness", "true_peak", "format", "subtype"]],
  ["more", "More", []],
];

const labelOf = (name) => LABELS[name] || name.replace(/_/g, " ");

const S = {
  root: null,
  form: null,
  specs: new Map(),
  controls: new Map(),
  stem: null,
  eqFiles: null,
  eqUnavailable: "",
  general: null,
};

// ------------------------------------------------------------------ field scaffolding

function fieldShell(spec, input, { extra = null, labelFor = null } = {}) {
  const id = labelFor || (input && input.id) || uniqueId(`set-${spec.name}`);
  const unit = spec.unit ? el("span", { class: "unit" }, spec.unit) : null;
  const range = rangeText(spec);
  const error = el("p", { class: "error field-problem", role: "alert", hidden: true, "data-problem": spec.name });
  const hint = el("p", { class: "hint" }, spec.help ? sentence(spec.help) : "",
    range && (spec.kind === "number" || spec.kind === "integer" || spec.kind === "level") ? ` Range: ${range}.` : "");
  const node = el("div", { class: "field", "data-option": spec.name },
    el("label", { for: id }, labelOf(spec.name), unit),
    input, extra, hint, error);
  return { node, error };
}

function control(spec, parts) {
  return { name: spec.name, spec, refresh() {}, ...parts };
}

function showProblem(ctrl, text) {
  ctrl.error.textContent = text || "";
  ctrl.error.hidden = !text;
  ctrl.node.classList.toggle("has-problem", Boolean(text));
}

// ------------------------------------------------------------------ generic controls

function numberControl(spec) {
  const input = el("input", {
    id: uniqueId(`set-${spec.name}`), type: "number", name: spec.name, inputmode: "decimal",
    step: spec.kind === "integer" ? "1" : "any",
    placeholder: spec.default !== null && spec.default !== undefined ? String(spec.default) : "",
  });
  const { node, error } = fieldShell(spec, input);
  return control(spec, {
    node, error, input,
    read() {
      if (input.value.trim() === "" && (spec.default === null || spec.default === undefined)) return undefined;
      return checkNumber(spec, input.value.trim() === "" ? spec.default : input.value, labelOf(spec.name));
    },
    write(v) { input.value = v === null || v === undefined ? (spec.default ?? "") : v; },
  });
}

function choiceControl(spec) {
  const select = el("select", { id: uniqueId(`set-${spec.name}`), name: spec.name });
  if (spec.default === null || spec.default === undefined) select.append(el("option", { value: "" }, "the default (see below)"));
  for (const c of spec.choices || []) select.append(el("option", { value: c }, String(c)));
  const { node, error } = fieldShell(spec, select);
  return control(spec, {
    node, error, input: select,
    read() { return select.value === "" ? undefined : select.value; },
    write(v) {
      const want = v === null || v === undefined ? (spec.default ?? "") : String(v);
      select.value = [...select.options].some((o) => o.value === want) ? want : (spec.default ?? "");
    },
  });
}

/** A level: a number in the unit, or one of the declared words ("match", "none", "off"). */
function levelControl(spec) {
  const mode = el("select", { id: uniqueId(`set-${spec.name}-mode`), name: `${spec.name}-mode`, "aria-label": `${labelOf(spec.name)}: kind` });
  const numberWord = spec.name === "true_peak" ? "ceiling" : "target";
  mode.append(el("option", { value: "#" }, `${numberWord} (${spec.unit || "number"})`));
  for (const c of spec.choices || []) mode.append(el("option", { value: c }, CHOICE_WORDS[c] || String(c)));
  const input = el("input", {
    id: uniqueId(`set-${spec.name}`), type: "number", step: "any", name: spec.name, inputmode: "decimal",
    placeholder: typeof spec.default === "number" ? String(spec.default) : "",
    "aria-label": `${labelOf(spec.name)} ${numberWord} in ${spec.unit || ""}`,
  });
  const pair = el("div", { class: "pair" }, mode, input);
  const { node, error } = fieldShell(spec, pair, { labelFor: mode.id });
  const sync = () => { input.disabled = mode.value !== "#"; };
  mode.addEventListener("change", sync);
  return control(spec, {
    node, error, input, mode,
    read() {
      if (mode.value !== "#") return mode.value;
      return checkNumber(spec, input.value, `${labelOf(spec.name)} ${numberWord}`);
    },
    write(v) {
      const value = v === null || v === undefined ? spec.default : v;
      if (typeof value === "number" || (typeof value === "string" && value.trim() !== "" && Number.isFinite(Number(value)))) {
        mode.value = "#";
        input.value = value;
      } else if (typeof value === "string" && (spec.choices || []).includes(value)) {
        mode.value = value;
        if (typeof spec.default === "number" && input.value === "") input.value = spec.default;
      } else {
        // null from a stored request: no gain / no limiter, the declared word for it.
        const word = (spec.choices || []).find((c) => c === "none" || c === "off");
        mode.value = word || "#";
      }
      sync();
    },
  });
}

function excerptControl(spec) {
  const start = el("input", { id: uniqueId("set-excerpt-start"), type: "number", step: "any", min: "0", "aria-label": "excerpt start in seconds", placeholder: "start" });
  const length = el("input", { type: "number", step: "any", min: "0", "aria-label": "excerpt length in seconds", placeholder: "length" });
  const pair = el("div", { class: "pair" }, start, el("span", { class: "muted" }, "for"), length);
  const { node, error } = fieldShell(spec, pair, { labelFor: start.id });
  return control(spec, {
    node, error,
    read() {
      if (start.value.trim() === "" && length.value.trim() === "") return undefined;
      const a = Number(start.value || 0);
      const b = Number(length.value);
      if (!Number.isFinite(a) || a < 0) throw new FieldProblem("Excerpt start must be 0 s or later.");
      if (!Number.isFinite(b) || b <= 0) throw new FieldProblem("Excerpt length must be more than 0 s.");
      return [a, b];
    },
    write(v) {
      const [a, b] = Array.isArray(v) ? v : ["", ""];
      start.value = a; length.value = b;
    },
  });
}

function textControl(spec) {
  const input = el("input", { id: uniqueId(`set-${spec.name}`), type: "text", name: spec.name, placeholder: spec.default ?? "" });
  const { node, error } = fieldShell(spec, input);
  return control(spec, {
    node, error, input,
    read() {
      const t = input.value.trim();
      if (t === "") return undefined;
      if (spec.kind !== "text") {
        try { return JSON.parse(t); } catch { throw new FieldProblem(`${labelOf(spec.name)} must be JSON here.`); }
      }
      return t;
    },
    write(v) { input.value = v === null || v === undefined ? "" : (typeof v === "string" ? v : JSON.stringify(v)); },
  });
}

/** A scene's rotation: yaw, pitch and roll in degrees (left out: not turned). */
function rotationControl(spec) {
  const id = uniqueId("set-rotate");
  const part = (name, first) => el("input", {
    id: first ? id : uniqueId(`set-rotate-${name}`), type: "number", step: "any", inputmode: "decimal",
    name: `rotate-${name}`, placeholder: "0", "aria-label": `${name} in degrees`, "data-angle": name,
  });
  const yaw = part("yaw", true); const pitch = part("pitch"); const roll = part("roll");
  const trio = el("div", { class: "pair rotation" },
    el("span", { class: "muted" }, "yaw"), yaw, el("span", { class: "muted" }, "pitch"), pitch,
    el("span", { class: "muted" }, "roll"), roll);
  const { node, error } = fieldShell(spec, trio, { labelFor: id });
  const inputs = [yaw, pitch, roll];
  return control(spec, {
    node, error, input: yaw,
    read() {
      if (inputs.every((i) => i.value.trim() === "")) return undefined;
      return inputs.map((i, k) => {
        const t = i.value.trim();
        const v = t === "" ? 0 : Number(t);
        if (!Number.isFinite(v)) throw new FieldProblem(`Rotation: ${["yaw", "pitch", "roll"][k]} must be a number of degrees.`);
        return v;
      });
    },
    write(v) {
      let angles = [];
      if (Array.isArray(v)) angles = v;
      else if (typeof v === "string" && !["none", "off", ""].includes(v.trim().toLowerCase())) angles = v.split(",").map(Number);
      inputs.forEach((i, k) => { i.value = angles[k] === undefined || angles[k] === null ? "" : angles[k]; });
    },
  });
}

// ------------------------------------------------------------------ layouts

function hasHeights(layout) {
  return layout.speakers.some((s) => !s.lfe && Math.abs(s.elevation) > 0.01);
}

/**
 * Whether a stem of `channels` channels can be rendered as `scene`: a full-sphere scene of
 * the scene's order or a higher one (the renderer then decodes its first (order + 1)^2
 * channels: how orders of one master are compared).
 */
function sceneFits(scene, channels) {
  const root = Math.round(Math.sqrt(channels));
  return root * root === channels && root >= 2 && root - 1 >= scene.order;
}

/** Whether a stem is an ADM object master (its upload found BS.2076 metadata). */
export function isAdm(stem) {
  return Boolean(stem && stem.adm);
}

/** An Ambisonic scene of GET /v1/layouts (kind "scene": channels, no speakers). */
export function isScene(layout) {
  return Boolean(layout) && layout.kind === "scene";
}

/** Channels a layout or scene takes. */
function channelsOf(layout) {
  return isScene(layout) ? layout.channels : layout.speakers.length;
}

/** Show the scene fields only for a scene and the loudspeaker-only fields only for
    loudspeakers; a hidden field sends nothing. */
function applyLayoutKind() {
  const layout = S.controls.get("layout")?.current() || null;
  const adm = isAdm(S.stem);
  const scene = isScene(layout) && !adm;
  const hide = (name, hidden) => {
    const ctrl = S.controls.get(name);
    if (ctrl) { ctrl.node.hidden = hidden; ctrl.off = hidden; }
  };
  for (const name of NOT_FOR_ADM) hide(name, adm);
  for (const name of SCENE_ONLY) hide(name, !scene);
  for (const name of SPEAKERS_ONLY) hide(name, scene || adm);
  hide("adm_programme", !adm);
  // A group shows while any of its fields does.
  for (const group of S.form ? S.form.querySelectorAll("[data-group]") : []) {
    group.hidden = [...group.querySelectorAll(":scope > [data-option]")].every((f) => f.hidden);
  }
  const solo = S.controls.get("solo");
  if (solo) solo.node.querySelector("label").firstChild.textContent = scene ? "Solo channel" : labelOf("solo");
}

function hasLfe(layout) {
  return layout.speakers.some((s) => s.lfe);
}

const layoutState = { transient: null };

function builtinLayouts() {
  return bus.state.catalog.layouts || [];
}

function layoutFromValue(value) {
  if (!value) return null;
  if (value.startsWith("b:")) return builtinLayouts().find((l) => l.name === value.slice(2)) || null;
  if (value.startsWith("p:")) {
    const p = presetById(value.slice(2));
    return p ? { ...p.body, name: p.body.name || p.name } : null;
  }
  if (value === "t:0") return layoutState.transient;
  return null;
}

function layoutControl(spec) {
  const select = el("select", { id: uniqueId("set-layout"), name: "layout" });
  const facts = el("p", { class: "note layout-facts", hidden: true });
  const { node, error } = fieldShell(spec, select, { extra: facts });
  const ctrl = control(spec, { node, error, input: select });

  const picture = el("div", { class: "scene-box", "data-part": "scene-box", hidden: true });
  const hint = el("p", { class: "note scene-hint", "data-part": "scene-hint", hidden: true });
  node.append(hint, picture);

  function fits(layout) {
    if (!S.stem) return true;
    return isScene(layout) ? sceneFits(layout, S.stem.channels) : channelsOf(layout) === S.stem.channels;
  }

  function option(value, layout, text) {
    const ok = fits(layout);
    return el("option", { value, disabled: !ok }, `${text} · ${channelsOf(layout)} ch${ok ? "" : " (does not fit)"}`);
  }

  ctrl.refresh = () => {
    const keep = select.value;
    select.replaceChildren();
    const builtins = builtinLayouts();
    const speakers = builtins.filter((l) => !isScene(l));
    const groups = [
      ["With LFE", speakers.filter((l) => !hasHeights(l) && hasLfe(l))],
      ["Without LFE", speakers.filter((l) => !hasHeights(l) && !hasLfe(l))],
      ["With heights", speakers.filter((l) => hasHeights(l))],
      ["Ambisonic scenes", builtins.filter(isScene)],
    ];
    for (const [title, list] of groups) {
      if (!list.length) continue;
      const words = (l) => (isScene(l) ? `${l.name} (order ${l.order})` : l.name);
      select.append(el("optgroup", { label: title, "data-kind": isScene(list[0]) ? "scene" : "loudspeakers" },
        list.map((l) => option(`b:${l.name}`, l, words(l)))));
    }
    const saved = presetsOf("layout");
    if (saved.length) {
      select.append(el("optgroup", { label: "Saved layouts" }, saved.map((p) => option(`p:${p.id}`, p.body, p.name))));
    }
    if (layoutState.transient) {
      select.append(el("optgroup", { label: "From a render" }, option("t:0", layoutState.transient, layoutState.transient.name || "custom")));
    }
    if (!builtins.length && !saved.length) select.append(el("option", { value: "" }, "no layouts (the server's list did not load)"));
    const usable = [...select.options].filter((o) => !o.disabled && o.value);
    if (keep && [...select.options].some((o) => o.value === keep) && (!S.stem || usable.some((o) => o.value === keep))) {
      select.value = keep;
    } else {
      pickForStem();
    }
    describe();
  };

  function pickForStem() {
    // A scene is never chosen for the user (a 4-channel file may be 4.0 or first order):
    // it is offered as a hint instead.
    const usable = [...select.options].filter((o) => !o.disabled && o.value && !isScene(layoutFromValue(o.value)));
    const suggested = S.stem && S.stem.suggested_layout ? `b:${S.stem.suggested_layout}` : null;
    const pick = usable.find((o) => o.value === suggested) || usable[0];
    if (pick) select.value = pick.value;
    else {
      if (![...select.options].some((o) => o.value === "")) {
        select.prepend(el("option", { value: "" }, S.stem ? `no layout has ${S.stem.channels} channels: make one under Speakers` : "choose a layout"));
      }
      select.value = "";
    }
  }

  function describe() {
    const layout = layoutFromValue(select.value);
    facts.hidden = !layout;
    showHint(layout);
    picture.hidden = !isScene(layout);
    picture.replaceChildren();
    applyLayoutKind();
    if (!layout) return;
    if (isScene(layout)) {
      facts.textContent = `${layout.description || layout.name}: Ambisonic scene of order ${layout.order}, ` +
        `${layout.channels} channels in ACN order, ${String(layout.default_normalisation || "sn3d").toUpperCase()} ` +
        "unless chosen below; decoded to the ears, no loudspeakers" +
        (S.stem && !fits(layout) ? ` · does not fit this ${S.stem.channels}-channel stem` : "");
      picture.append(scenePicture(layout, layout.directions, { caption: "dots: the order's t-design directions" }));
      return;
    }
    const mains = layout.speakers.filter((s) => !s.lfe).length;
    const lfe = layout.speakers.length - mains;
    facts.textContent = `${layout.description || layout.name}: ${mains} loudspeaker${mains === 1 ? "" : "s"}` +
      `${lfe ? ` + ${lfe} LFE` : ""}${layout.source ? ` · ${layout.source}` : ""}` +
      (S.stem && !fits(layout) ? ` · does not fit this ${S.stem.channels}-channel stem` : "");
  }

  function showHint(layout) {
    const h = S.stem && S.stem.scene_hint;
    const scene = h && builtinLayouts().find((l) => l.name === h.layout);
    hint.replaceChildren();
    hint.hidden = !scene || (layout && layout.name === scene.name && isScene(layout));
    if (hint.hidden) return;
    const use = el("button", { type: "button", class: "btn btn-small", "data-action": "use-scene-hint" },
      `Use ${scene.name} (order ${scene.order} scene)`);
    use.addEventListener("click", () => {
      select.value = `b:${scene.name}`;
      select.dispatchEvent(new Event("change", { bubbles: true }));
    });
    hint.append(`${S.stem.channels} channels may also be an Ambisonic scene of order ${scene.order}. `, use);
  }

  select.addEventListener("change", () => { describe(); bus.emit("settings-layout-changed", {}); });
  ctrl.current = () => layoutFromValue(select.value);
  ctrl.pickForStem = () => { ctrl.refresh(); };
  ctrl.read = () => {
    const v = select.value;
    if (!v) return undefined;
    if (v.startsWith("b:")) return v.slice(2);
    const layout = layoutFromValue(v);
    if (!layout) throw new FieldProblem("The saved layout is gone; choose another.");
    const body = { name: layout.name, speakers: layout.speakers };
    if (layout.description) body.description = layout.description;
    if (layout.source) body.source = layout.source;
    return body;
  };
  ctrl.write = (v) => {
    if (v === null || v === undefined) { layoutState.transient = null; ctrl.refresh(); pickForStem(); describe(); return; }
    if (typeof v === "string") {
      const hit = builtinLayouts().find((l) => l.name.toLowerCase() === v.toLowerCase());
      if (hit) { ctrl.refresh(); select.value = `b:${hit.name}`; describe(); return; }
      const saved = presetsOf("layout").find((p) => p.name === v);
      if (saved) { ctrl.refresh(); select.value = `p:${saved.id}`; describe(); return; }
      throw new FieldProblem(`The layout “${v}” is not on this server.`);
    }
    const same = presetsOf("layout").find((p) => stableJson(p.body.speakers) === stableJson(v.speakers));
    if (same) { layoutState.transient = null; ctrl.refresh(); select.value = `p:${same.id}`; describe(); return; }
    layoutState.transient = v;
    ctrl.refresh();
    select.value = "t:0";
    describe();
  };
  ctrl.selectPreset = (id) => { ctrl.refresh(); select.value = `p:${id}`; describe(); bus.emit("settings-layout-changed", {}); };
  ctrl.refresh();
  return ctrl;
}

// ------------------------------------------------------------------ ADM masters

/** The summary of an ADM master's programme in words (stem.adm, or GET .../objects). */
function admWords(adm) {
  const n = (count, one, many) => `${count} ${count === 1 ? one : many}`;
  const p = adm.programme || {};
  const name = p.name ? `“${p.name}” (${p.id})` : "every object (the file names no programme)";
  const beds = adm.beds ? `${n(adm.beds, "bed loudspeaker", "bed loudspeakers")}${(adm.bed_labels || []).length ? ` (${adm.bed_labels.filter(Boolean).join(" ")})` : ""}` : "no bed";
  const hoa = adm.hoa_tracks ? `, ${n(adm.hoa_tracks, "HOA track", "HOA tracks")} (order ${(adm.hoa_orders || []).join(", ")})` : "";
  return `ADM master (${adm.container || "WAV"}, ${n(adm.tracks, "track", "tracks")}, ${num(adm.duration_s, 2)} s): ` +
    `programme ${name} plays ${n(adm.objects, "object", "objects")} (${adm.moving_objects ?? 0} moving), ${beds}${hoa}. ` +
    "Its metadata places every track: no layout to choose.";
}

/**
 * The ADM master of the chosen stem: its summary, the programme to render (a picker when
 * the file has several; sent as adm_programme only when it is not the first, the one the
 * server plays by default), what is not rendered, and the objects' paths over time
 * (GET /v1/stems/{id}/objects, draw.js objectPathsPicture) with a time slider.
 */
function admControl(spec) {
  const select = el("select", { id: uniqueId("set-adm-programme"), name: "adm_programme", "data-part": "adm-programme" });
  const summary = el("p", { class: "note adm-summary", "data-part": "adm-summary" });
  const ignored = el("ul", { class: "messages adm-ignored", "data-part": "adm-ignored", hidden: true });
  const box = el("div", { class: "scene-box", "data-part": "adm-picture-box" });
  const time = el("input", { type: "range", min: "0", max: "0", step: "1", value: "0", "data-part": "adm-time", "aria-label": "Time in the master" });
  const timeText = el("output", { class: "mono", "data-part": "adm-time-text" }, "0.00 s");
  const timeRow = el("label", { class: "adm-time", hidden: true }, el("span", { class: "muted" }, "Time "), time, timeText);
  const { node, error } = fieldShell(spec, select, { extra: el("div", {}, summary, ignored, box, timeRow) });
  const ctrl = control(spec, { node, error, input: select });
  let first = null; // the programme played when none is named
  let picture = null;
  let asked = 0;

  function showSummary(adm) {
    summary.textContent = admWords(adm);
    const lost = adm.ignored || [];
    ignored.replaceChildren(...lost.map((why) => el("li", { class: "warn" }, `Not rendered: ${why}`)));
    if ((adm.ignored_total || 0) > lost.length) ignored.append(el("li", { class: "warn" }, `… and ${adm.ignored_total - lost.length} more.`));
    ignored.hidden = !lost.length;
  }

  function setTime() {
    const t = Number(time.value) / 1000;
    timeText.textContent = `${t.toFixed(2)} s`;
    if (picture) picture.setTime(t);
  }

  async function draw() {
    const stem = S.stem;
    const mine = ++asked;
    box.replaceChildren(el("p", { class: "muted" }, "Reading the objects' paths…"));
    timeRow.hidden = true;
    picture = null;
    const programme = select.value && select.value !== first ? select.value : null;
    try {
      const overview = await api(`/v1/stems/${stem.id}/objects${programme ? `?programme=${encodeURIComponent(programme)}` : ""}`);
      if (mine !== asked) return; // another stem or programme was chosen meanwhile
      showSummary(overview);
      picture = objectPathsPicture(overview, { caption: "dots: where each object is at the time below" });
      box.replaceChildren(picture);
      time.max = String(Math.max(0, Math.round(Number(overview.duration_s) * 1000) - 1));
      time.value = "0";
      timeRow.hidden = false;
      setTime();
    } catch (err) {
      if (mine !== asked) return;
      box.replaceChildren(el("p", { class: "warn" }, `The objects' paths cannot be read: ${err.message}`));
    }
  }

  ctrl.refresh = () => {
    const adm = isAdm(S.stem) ? S.stem.adm : null;
    select.replaceChildren();
    box.replaceChildren();
    timeRow.hidden = true;
    asked += 1;
    if (!adm) { first = null; summary.textContent = ""; ignored.hidden = true; return; }
    const programmes = adm.programmes || [];
    first = programmes.length ? programmes[0].id : null;
    for (const p of programmes) select.append(el("option", { value: p.id }, `${p.name || p.id} (${p.id})`));
    select.hidden = programmes.length < 2;
    select.value = (adm.programme && adm.programme.id) || first || "";
    showSummary(adm);
    draw();
  };
  select.addEventListener("change", draw);
  time.addEventListener("input", setTime);
  ctrl.read = () => (select.value && select.value !== first ? select.value : undefined);
  ctrl.write = (v) => {
    if (v === null || v === undefined || v === "") {
      if (first && select.value !== first) { select.value = first; draw(); }
      return;
    }
    const hit = [...select.options].find((o) => o.value === String(v).toUpperCase() || o.textContent.startsWith(`${v} (`));
    if (!hit) throw new FieldProblem(`The programme “${v}” is not in this master.`);
    if (select.value !== hit.value) { select.value = hit.value; draw(); }
  };
  return ctrl;
}

// ------------------------------------------------------------------ channel order

const ORDER_WORDS = {
  wav: "wav: the WAV channel-mask order",
  film: "film: L C R … LFE last",
};

function defaultMapping(layout, channels) {
  const labels = layout.speakers.map((s) => s.label);
  const found = S.stem && Array.isArray(S.stem.channel_labels) ? S.stem.channel_labels : null;
  const lower = labels.map((l) => l.toLowerCase());
  if (found && found.length === channels && found.every((l) => lower.includes(String(l).toLowerCase()))) {
    return found.map((l) => labels[lower.indexOf(String(l).toLowerCase())]);
  }
  return Array.from({ length: channels }, (_, i) => labels[i] || labels[0]);
}

function channelOrderControl(spec) {
  const select = el("select", { id: uniqueId("set-channel-order"), name: "channel_order" });
  const orderText = el("p", { class: "hint order-labels mono" });
  const grid = el("div", { class: "mapping", hidden: true, role: "group", "aria-label": "file channel to loudspeaker" });
  const { node, error } = fieldShell(spec, select, { extra: el("div", {}, orderText, grid) });
  const ctrl = control(spec, { node, error, input: select });
  let mapping = [];
  let layout = null;

  function drawGrid() {
    grid.replaceChildren();
    if (!layout) return;
    const labels = layout.speakers.map((s) => s.label);
    mapping.forEach((label, i) => {
      const pick = el("select", { "aria-label": `file channel ${i + 1}`, "data-channel": i },
        labels.map((l) => el("option", { value: l }, l)));
      pick.value = label;
      pick.addEventListener("change", () => { mapping[i] = pick.value; check(); });
      grid.append(el("label", { class: "map-cell" }, el("span", { class: "muted" }, `ch ${i + 1}`), pick));
    });
    check();
  }

  function check() {
    const seen = new Map();
    mapping.forEach((l) => seen.set(l, (seen.get(l) || 0) + 1));
    const twice = [...seen].filter(([, n]) => n > 1).map(([l]) => l);
    for (const pick of grid.querySelectorAll("select")) {
      pick.toggleAttribute("aria-invalid", twice.includes(pick.value));
    }
    return twice;
  }

  function showOrder() {
    const v = select.value;
    grid.hidden = v !== "custom";
    if (v === "custom") orderText.textContent = "File channel → loudspeaker; each loudspeaker once.";
    else if (v && layout && layout.orders && layout.orders[v]) orderText.textContent = layout.orders[v].join(" ");
    else orderText.textContent = S.stem && S.stem.labels_source
      ? `From the file's ${S.stem.labels_source}${S.stem.channel_labels ? `: ${S.stem.channel_labels.join(" ")}` : ""}.`
      : layout ? `The layout's order: ${layout.speakers.map((s) => s.label).join(" ")}` : "";
  }

  ctrl.refresh = () => {
    const keep = select.value;
    layout = S.controls.get("layout") ? S.controls.get("layout").current() : null;
    select.replaceChildren(el("option", { value: "" }, "from the file, else the layout's order"));
    const orders = layout && layout.orders ? Object.keys(layout.orders) : [];
    for (const name of orders) select.append(el("option", { value: name }, ORDER_WORDS[name] || name));
    select.append(el("option", { value: "custom" }, "custom: channel by channel"));
    select.value = [...select.options].some((o) => o.value === keep) ? keep : "";
    const channels = S.stem ? S.stem.channels : layout ? layout.speakers.length : 0;
    mapping = layout ? defaultMapping(layout, channels) : [];
    drawGrid();
    showOrder();
  };
  select.addEventListener("change", showOrder);
  ctrl.read = () => {
    const v = select.value;
    if (!v) return undefined;
    if (v !== "custom") return v;
    const twice = check();
    if (twice.length) throw new FieldProblem(`Channel order: each loudspeaker once; ${twice.join(", ")} ${twice.length > 1 ? "are" : "is"} chosen more than once.`);
    return mapping.slice();
  };
  ctrl.write = (v) => {
    ctrl.refresh();
    if (v === null || v === undefined || v === "") { select.value = ""; }
    else if (typeof v === "string") {
      select.value = [...select.options].some((o) => o.value === v) ? v : "";
      if (select.value !== v) throw new FieldProblem(`The channel order “${v}” is not offered for this layout.`);
    } else if (Array.isArray(v)) {
      select.value = "custom";
      const labels = layout ? layout.speakers.map((s) => s.label) : [];
      mapping = v.map((l) => labels.find((x) => x.toLowerCase() === String(l).toLowerCase()) || labels[0]);
      drawGrid();
    }
    showOrder();
  };
  ctrl.namedOrder = () => (select.value && select.value !== "custom" ? select.value : null);
  return ctrl;
}

function soloControl(spec) {
  const select = el("select", { id: uniqueId("set-solo"), name: "solo" });
  const { node, error } = fieldShell(spec, select);
  const ctrl = control(spec, { node, error, input: select });
  ctrl.refresh = () => {
    const keep = select.value;
    const layout = S.controls.get("layout") ? S.controls.get("layout").current() : null;
    select.replaceChildren(el("option", { value: "" }, isScene(layout) ? "none: every channel" : "none: every loudspeaker"));
    const labels = isScene(layout) ? layout.labels || [] : ((layout && layout.speakers) || []).map((s) => s.label);
    for (const label of labels) select.append(el("option", { value: label }, label));
    select.value = [...select.options].some((o) => o.value === keep) ? keep : "";
  };
  ctrl.read = () => (select.value === "" ? undefined : select.value);
  ctrl.write = (v) => { ctrl.refresh(); select.value = v && [...select.options].some((o) => o.value === v) ? v : ""; };
  ctrl.refresh();
  return ctrl;
}

// ------------------------------------------------------------------ HRTF sets

function hrtfControl(spec) {
  const select = el("select", { id: uniqueId("set-hrtf"), name: "hrtf" });
  const file = el("input", { type: "file", accept: ".sofa", hidden: true, "data-upload": "sofa" });
  const status = el("span", { class: "hint upload-status", role: "status" });
  const add = el("button", { type: "button", class: "btn btn-small" }, "Add a SOFA file…");
  add.addEventListener("click", () => file.click());
  const extra = el("div", { class: "toolbar" }, add, file, status);
  const { node, error } = fieldShell(spec, select, { extra });
  const ctrl = control(spec, { node, error, input: select });
  let unknown = null;

  ctrl.refresh = () => {
    const keep = select.value;
    const sets = bus.state.catalog.hrtfSets || [];
    select.replaceChildren();
    const shipped = sets.filter((s) => s.kind !== "uploaded");
    const mine = sets.filter((s) => s.kind === "uploaded");
    if (shipped.length) select.append(el("optgroup", { label: "Shipped" }, shipped.map((s) => el("option", { value: s.id || s.name }, `${s.name}${s.default ? " (default)" : ""}`))));
    if (mine.length) select.append(el("optgroup", { label: "Uploaded" }, mine.map((s) => el("option", { value: s.id }, s.name || s.id))));
    if (unknown) select.append(el("option", { value: unknown }, `${unknown} (not on this server)`));
    const def = sets.find((s) => s.default);
    if (keep && [...select.options].some((o) => o.value === keep)) select.value = keep;
    else if (def) select.value = def.id || def.name;
  };
  ctrl.read = () => (select.value === "" ? undefined : select.value);
  ctrl.write = (v) => {
    unknown = null;
    const sets = bus.state.catalog.hrtfSets || [];
    if (v === null || v === undefined || v === "") {
      const def = sets.find((s) => s.default);
      ctrl.refresh();
      if (def) select.value = def.id || def.name;
      return;
    }
    const hit = sets.find((s) => s.id === v || s.name === v);
    if (!hit) unknown = v;
    ctrl.refresh();
    select.value = hit ? hit.id || hit.name : v;
  };

  file.addEventListener("change", async () => {
    const chosen = file.files[0];
    file.value = "";
    if (!chosen) return;
    const form = new FormData();
    form.append("file", chosen, chosen.name);
    status.textContent = `sending ${chosen.name}…`;
    showProblem(ctrl, "");
    try {
      const made = await upload("/v1/hrtf-sets", form, (loaded, total) => {
        status.textContent = total ? `sending ${chosen.name}: ${Math.round((100 * loaded) / total)} %` : "sending…";
      });
      bus.state.catalog.hrtfSets = await api("/v1/hrtf-sets");
      ctrl.refresh();
      select.value = made.id;
      status.textContent = `${chosen.name} added.`; // only once it is listed and chosen
      bus.emit("catalog-changed", { catalog: bus.state.catalog, source: "hrtf" });
      bus.emit("notify", { message: `HRTF set ${chosen.name} added.`, kind: "ok" });
    } catch (err) {
      status.textContent = "";
      showProblem(ctrl, sentence(`${chosen.name} was not taken: ${err.message}`));
    }
  });
  ctrl.refresh();
  return ctrl;
}

// ------------------------------------------------------------------ headphone EQ

async function loadEqFiles() {
  try {
    const answer = await api("/v1/headphone-eq");
    S.eqFiles = Array.isArray(answer) ? answer : (answer && (answer.items || answer.files)) || [];
    S.eqUnavailable = "";
  } catch (err) {
    S.eqFiles = [];
    S.eqUnavailable = err instanceof ApiError && (err.status === 404 || err.status === 405)
      ? "This server does not take headphone EQ files yet (no /v1/headphone-eq)."
      : `The headphone EQ files cannot be read: ${err.message}`;
  }
}

/** An uploaded headphone EQ file in words, from the server's summary. */
function eqSummary(file) {
  const s = file.summary;
  if (typeof s === "string") return s;
  if (file.kind === "bands") {
    const types = Array.isArray(s.types) ? ` (${s.types.join(", ")})` : "";
    return `${s.bands} band${s.bands === 1 ? "" : "s"}${types}, ${num(s.frequency_min_hz, 0)} to ${num(s.frequency_max_hz, 0)} Hz` +
      (typeof s.gain_db === "number" && s.gain_db ? `, overall gain ${num(s.gain_db, 1)} dB` : "");
  }
  if (file.kind === "impulse_response") {
    return `impulse response: ${s.channels} channel${s.channels === 1 ? "" : "s"}, ${num(s.seconds * 1000, 1)} ms, recorded at ${num(s.samplerate, 0)} Hz`;
  }
  return "";
}

function headphoneEqControl(spec) {
  const select = el("select", { id: uniqueId("set-headphone-eq"), name: "headphone_eq" });
  const file = el("input", { type: "file", accept: ".json,.wav,.flac,application/json,audio/wav", hidden: true, "data-upload": "headphone-eq" });
  const add = el("button", { type: "button", class: "btn btn-small" }, "Add a band list or impulse response…");
  const remove = el("button", { type: "button", class: "btn btn-small btn-quiet" }, "Remove this file");
  const status = el("span", { class: "hint upload-status", role: "status" });
  const note = el("p", { class: "note", hidden: true });
  add.addEventListener("click", () => file.click());
  const extra = el("div", {}, el("div", { class: "toolbar" }, add, remove, file), status, note);
  const { node, error } = fieldShell(spec, select, { extra });
  const ctrl = control(spec, { node, error, input: select });
  let inline = null;
  let unknown = null;

  ctrl.refresh = () => {
    const keep = select.value;
    select.replaceChildren(el("option", { value: "" }, "none"));
    for (const f of S.eqFiles || []) {
      select.append(el("option", { value: f.id }, `${f.name}${f.kind ? ` (${f.kind === "bands" ? "bands" : "impulse response"})` : ""}`));
    }
    if (inline) select.append(el("option", { value: "inline" }, `${inline.length} band${inline.length === 1 ? "" : "s"} from loaded settings`));
    if (unknown) select.append(el("option", { value: unknown }, "a file not on this server"));
    select.value = [...select.options].some((o) => o.value === keep) ? keep : "";
    note.hidden = !S.eqUnavailable;
    note.textContent = S.eqUnavailable;
    add.disabled = Boolean(S.eqUnavailable);
    describe();
  };
  function describe() {
    const f = (S.eqFiles || []).find((x) => x.id === select.value);
    remove.hidden = !f;
    if (f && f.summary) status.textContent = eqSummary(f);
    else if (select.value === "inline") status.textContent = inline.map((b) => `${b.type} ${num(b.frequency, 0)} Hz ${num(b.gain_db ?? 0, 1)} dB`).join("; ");
    else status.textContent = "";
  }
  select.addEventListener("change", describe);
  ctrl.read = () => {
    const v = select.value;
    if (!v) return undefined;
    return v === "inline" ? inline : v;
  };
  ctrl.write = (v) => {
    inline = Array.isArray(v) ? v : null;
    unknown = typeof v === "string" && v && !(S.eqFiles || []).some((f) => f.id === v) ? v : null;
    ctrl.refresh();
    select.value = Array.isArray(v) ? "inline" : (typeof v === "string" ? v : "");
    describe();
  };
  file.addEventListener("change", async () => {
    const chosen = file.files[0];
    file.value = "";
    if (!chosen) return;
    // The server's limits (GET /v1/options "headphone_eq"): a band list is a small JSON
    // file, an impulse response a short WAV; a bigger file is refused before sending.
    const limits = (bus.state.catalog.options && bus.state.catalog.options.headphone_eq) || {};
    const isJson = /\.json$/i.test(chosen.name) || chosen.type === "application/json";
    const cap = isJson ? limits.max_json_bytes : limits.max_ir_bytes;
    if (cap && chosen.size > cap) {
      showProblem(ctrl, `${chosen.name} is ${num(chosen.size / 1024, 0)} kB; this server takes ${isJson ? "band lists" : "impulse responses"} up to ${num(cap / 1024, 0)} kB.`);
      return;
    }
    const form = new FormData();
    form.append("file", chosen, chosen.name);
    showProblem(ctrl, "");
    status.textContent = `sending ${chosen.name}…`;
    try {
      const made = await upload("/v1/headphone-eq", form, () => {});
      await loadEqFiles();
      ctrl.refresh();
      select.value = made.id;
      describe();
      bus.emit("notify", { message: `Headphone EQ ${chosen.name} added.`, kind: "ok" });
    } catch (err) {
      status.textContent = "";
      showProblem(ctrl, sentence(`${chosen.name} was not taken: ${err.message}`));
    }
  });
  let armed = 0;
  remove.addEventListener("click", async () => {
    const id = select.value;
    if (Date.now() - armed > 4000) {
      armed = Date.now();
      remove.textContent = "Click again to remove";
      setTimeout(() => { remove.textContent = "Remove this file"; }, 4000);
      return;
    }
    armed = 0;
    remove.textContent = "Remove this file";
    try {
      await api(`/v1/headphone-eq/${encodeURIComponent(id)}`, { method: "DELETE" });
      await loadEqFiles();
      ctrl.refresh();
    } catch (err) {
      showProblem(ctrl, sentence(`The file was not removed: ${err.message}`));
    }
  });
  ctrl.refresh();
  return ctrl;
}

// ------------------------------------------------------------------ room

function roomControl(spec) {
  const select = el("select", { id: uniqueId("set-room"), name: "room" });
  const figures = el("div", { class: "room-box", "data-part": "room-figures" });
  const { node, error } = fieldShell(spec, select, { extra: figures });
  const ctrl = control(spec, { node, error, input: select });
  const rooms = () => bus.state.catalog.rooms || [];
  const editor = createRoomEditor({ rooms: rooms(), onChange: () => showProblem(ctrl, "") });
  let lastPreset = null;

  ctrl.refresh = () => {
    const keep = select.value;
    const list = rooms();
    select.replaceChildren(...list.map((r) => el("option", { value: r.name }, r.name === "none" ? "none (anechoic)" : r.name)));
    if (!list.length) select.append(el("option", { value: spec.default || "none" }, spec.default || "none"));
    select.append(el("option", { value: "__custom" }, "custom room…"));
    select.value = [...select.options].some((o) => o.value === keep) ? keep : (spec.default || "none");
    show();
  };

  function show() {
    figures.replaceChildren();
    if (select.value === "__custom") {
      editor.setLayout(S.controls.get("layout") ? S.controls.get("layout").current() : null);
      figures.append(editor.node);
      return;
    }
    lastPreset = select.value;
    const room = rooms().find((r) => r.name === select.value);
    if (room) figures.append(roomFigures(room));
  }

  select.addEventListener("change", () => {
    if (select.value === "__custom") {
      const start = rooms().find((r) => r.name === lastPreset && r.dimensions_m) || rooms().find((r) => r.dimensions_m);
      editor.write(start ? { ...start, name: "custom" } : { name: "custom" });
    }
    show();
  });
  ctrl.onLayout = () => editor.setLayout(S.controls.get("layout") ? S.controls.get("layout").current() : null);
  ctrl.read = () => {
    if (select.value === "__custom") return editor.read();
    return select.value || undefined;
  };
  ctrl.write = (v) => {
    ctrl.refresh();
    if (v && typeof v === "object") {
      select.value = "__custom";
      editor.write(v);
    } else {
      select.value = v && [...select.options].some((o) => o.value === v) ? v : (spec.default || "none");
    }
    show();
  };
  ctrl.isCustom = () => select.value === "__custom";
  ctrl.showProblemInside = (text) => editor.showProblem(text);
  ctrl.refresh();
  return ctrl;
}

// ------------------------------------------------------------------ building the form

function makeControl(spec) {
  switch (spec.name) {
    case "adm_programme": return admControl(spec);
    case "layout": return layoutControl(spec);
    case "channel_order": return channelOrderControl(spec);
    case "hrtf": return hrtfControl(spec);
    case "room": return roomControl(spec);
    case "headphone_eq": return headphoneEqControl(spec);
    case "solo": return soloControl(spec);
    default: break;
  }
  switch (spec.kind) {
    case "rotation": return rotationControl(spec);
    case "number": case "integer": return numberControl(spec);
    case "choice": return choiceControl(spec);
    case "level": return levelControl(spec);
    case "excerpt": return excerptControl(spec);
    default: return textControl(spec);
  }
}

function optionsList() {
  const options = bus.state.catalog.options;
  if (!options) return null;
  return Array.isArray(options.render) ? options.render : null;
}

function build() {
  const root = S.root;
  root.replaceChildren();
  S.controls.clear();
  S.specs.clear();
  const list = optionsList();
  if (!list) {
    root.append(el("p", { class: "warn", "data-state": "no-options" },
      S.catalogSeen
        ? "The render settings cannot be shown: the server does not declare its options (GET /v1/options did not answer). Renders can still be started from the API."
        : "Loading the render settings…"));
    return;
  }
  for (const spec of list) S.specs.set(spec.name, spec);

  const stemLine = el("p", { class: "stem-line", "data-part": "stem" });
  const presetBar = buildPresetBar();
  S.form = el("form", { class: "settings-form", novalidate: true, onsubmit: (e) => e.preventDefault() });
  const placed = new Set();
  for (const [key, title, names] of GROUPS) {
    const members = key === "more"
      ? list.filter((s) => !GROUPS.some(([, , n]) => n.includes(s.name))).map((s) => s.name)
      : names.filter((n) => S.specs.has(n));
    if (!members.length) continue;
    const box = el("fieldset", { class: `group group-${key}`, "data-group": key }, el("legend", {}, title));
    for (const name of members) {
      if (placed.has(name)) continue;
      placed.add(name);
      const ctrl = makeControl(S.specs.get(name));
      S.controls.set(name, ctrl);
      box.append(ctrl.node);
    }
    S.form.append(box);
  }
  S.general = el("p", { class: "error", role: "alert", hidden: true, "data-problem": "general" });
  const actions = buildActions();
  const batch = buildBatch();
  root.append(el("div", { class: "settings-head" }, stemLine, presetBar), S.form, batch, S.general, actions);
  for (const name of ["channel_order", "solo"]) if (S.controls.has(name)) S.controls.get(name).refresh();
  S.controls.get("layout")?.input.addEventListener("change", () => {
    for (const name of ["channel_order", "solo"]) if (S.controls.has(name)) S.controls.get(name).refresh();
    S.refreshBatch && S.refreshBatch();
  });
  for (const ctrl of S.controls.values()) if (ctrl.write && !["layout", "channel_order", "solo", "hrtf", "room", "headphone_eq"].includes(ctrl.name)) ctrl.write(undefined);
  applyLayoutKind();
  S.form.addEventListener("input", (e) => clearProblemAt(e.target));
  S.form.addEventListener("change", (e) => clearProblemAt(e.target));
  showStem();
}

function clearProblemAt(target) {
  const field = target.closest && target.closest("[data-option]");
  if (!field) return;
  const ctrl = S.controls.get(field.dataset.option);
  if (ctrl) showProblem(ctrl, "");
}

function showStem() {
  const line = S.root.querySelector("[data-part='stem']");
  if (line) {
    line.replaceChildren();
    if (S.stem) {
      const name = stemName(S.stem);
      line.append(el("span", { class: "muted" }, "Stem "), el("strong", {}, name),
        el("span", { class: "muted" }, ` · ${S.stem.channels} ch · ${num(S.stem.samplerate / 1000, 1)} kHz · ${num(S.stem.duration_s, 2)} s` +
          (isAdm(S.stem) ? " · ADM master" : "")));
    } else {
      line.append(el("span", { class: "muted" }, "No stem chosen: pick one under Stems to render."));
    }
  }
  const render = S.root.querySelector("[data-action='render']");
  if (render) render.disabled = !S.stem;
}

function stemName(stem) {
  if (stem.name) return stem.name;
  const files = stem.files || [];
  if (!files.length) return stem.id.slice(0, 8);
  return files.length === 1 ? files[0].name : `${files[0].name} + ${files.length - 1} more`;
}

// ------------------------------------------------------------------ reading and filling

/** The settings as a render request body (no stem_id); throws after marking the fields. */
function collect() {
  clearProblems();
  const body = {};
  const problems = [];
  for (const [name, ctrl] of S.controls) {
    if (ctrl.off) continue; // a field of the other kind of layout
    try {
      const v = ctrl.read();
      if (v !== undefined) body[name] = v;
    } catch (err) {
      if (!(err instanceof FieldProblem)) throw err;
      problems.push([ctrl, err.message]);
    }
  }
  if (problems.length) {
    for (const [ctrl, text] of problems) showProblem(ctrl, text);
    problems[0][0].node.scrollIntoView({ block: "nearest" });
    throw new FieldProblem(`${problems.length} setting${problems.length > 1 ? "s need" : " needs"} a look before sending.`);
  }
  return body;
}

/** Fill the form from settings (a preset's body, or a render's request). */
function fill(values) {
  clearProblems();
  const order = ["layout", ...[...S.controls.keys()].filter((n) => n !== "layout")];
  const notes = [];
  for (const name of order) {
    const ctrl = S.controls.get(name);
    if (!ctrl) continue;
    try {
      ctrl.write(values[name]);
    } catch (err) {
      if (!(err instanceof FieldProblem)) throw err;
      showProblem(ctrl, err.message);
      notes.push(err.message);
    }
    if (name === "layout") for (const n of ["channel_order", "solo"]) S.controls.get(n)?.refresh();
  }
  applyLayoutKind();
  S.refreshBatch && S.refreshBatch();
  bus.emit("settings-layout-changed", {});
  const ignored = Object.keys(values).filter((k) => k !== "stem_id" && !S.controls.has(k));
  if (ignored.length) notes.push(`Not offered by this server: ${ignored.join(", ")}.`);
  return notes;
}

function clearProblems() {
  for (const ctrl of S.controls.values()) showProblem(ctrl, "");
  if (S.general) { S.general.hidden = true; S.general.textContent = ""; }
}

function showApiProblem(err) {
  const { fields, general } = problemsByField(err, labelOf, new Set(S.controls.keys()));
  for (const [name, text] of fields) showProblem(S.controls.get(name), text);
  if (general) { S.general.textContent = general; S.general.hidden = false; }
  const first = fields.size ? S.controls.get([...fields.keys()][0]).node : S.general;
  first.scrollIntoView({ block: "nearest" });
}

// ------------------------------------------------------------------ presets bar

function buildPresetBar() {
  const select = el("select", { id: uniqueId("set-preset"), "aria-label": "saved settings", "data-part": "preset-select" });
  const apply = el("button", { type: "button", class: "btn btn-small", "data-action": "preset-apply" }, "Apply");
  const overwrite = el("button", { type: "button", class: "btn btn-small", "data-action": "preset-update" }, "Update");
  const remove = el("button", { type: "button", class: "btn btn-small btn-quiet", "data-action": "preset-delete" }, "Delete");
  const limits = (bus.state.catalog.options && bus.state.catalog.options.presets) || {};
  const name = el("input", { type: "text", maxlength: limits.name_max || null, placeholder: "name for these settings", "aria-label": "preset name", "data-part": "preset-name" });
  const save = el("button", { type: "button", class: "btn btn-small", "data-action": "preset-save" }, "Save as new");
  const message = el("p", { class: "hint", role: "status", "data-part": "preset-message" });
  const box = el("div", { class: "preset-bar" },
    el("div", { class: "toolbar" }, el("label", { for: select.id, class: "label" }, "Saved"), select, apply, overwrite, remove),
    el("div", { class: "toolbar" }, name, save), message);

  function fillList() {
    const keep = select.value;
    const list = presetsOf("settings");
    select.replaceChildren(el("option", { value: "" }, list.length ? "choose saved settings" : "none saved yet"),
      ...list.map((p) => el("option", { value: p.id }, p.name)));
    select.value = list.some((p) => p.id === keep) ? keep : "";
    const off = Boolean(presetsState.unavailable);
    for (const b of [apply, overwrite, remove]) b.disabled = off || !select.value;
    save.disabled = off;
    if (off) say(presetsState.unavailable, "warn");
  }
  function say(text, kind = "hint") { message.textContent = text; message.className = kind === "hint" ? "hint" : kind; }

  select.addEventListener("change", fillList);
  apply.addEventListener("click", () => {
    const p = presetById(select.value);
    if (!p) return;
    const notes = fill(p.body);
    say(notes.length ? `Applied “${p.name}”. ${notes.join(" ")}` : `Applied “${p.name}”.`, notes.length ? "warn" : "hint");
  });
  save.addEventListener("click", async () => {
    const n = name.value.trim();
    if (!n) { say("Give the settings a name first.", "error"); name.focus(); return; }
    const twin = presetsOf("settings").find((p) => p.name.toLowerCase() === n.toLowerCase());
    if (twin) { say(`“${twin.name}” exists already: choose it above and Update it, or give another name.`, "error"); return; }
    let body;
    try { body = collect(); } catch (err) { if (err instanceof FieldProblem) { say(err.message, "error"); return; } throw err; }
    try {
      const made = await createPreset(n, "settings", body);
      name.value = "";
      fillList();
      select.value = made.id;
      fillList();
      say(`Saved as “${made.name}”.`);
    } catch (err) {
      if (err.status === 422) showApiProblem(err);
      say(sentence(`Not saved: ${err.message}`), "error");
    }
  });
  overwrite.addEventListener("click", async () => {
    const p = presetById(select.value);
    if (!p) return;
    let body;
    try { body = collect(); } catch (err) { if (err instanceof FieldProblem) { say(err.message, "error"); return; } throw err; }
    try {
      await updatePreset(p.id, p.name, "settings", body);
      fillList();
      say(`“${p.name}” now holds these settings.`);
    } catch (err) {
      say(sentence(`Not updated: ${err.message}`), "error");
    }
  });
  let armed = 0;
  remove.addEventListener("click", async () => {
    const p = presetById(select.value);
    if (!p) return;
    if (Date.now() - armed > 4000) {
      armed = Date.now();
      say(`Click Delete again to delete “${p.name}”.`, "warn");
      return;
    }
    armed = 0;
    try {
      await deletePreset(p.id);
      fillList();
      say(`Deleted “${p.name}”.`);
    } catch (err) {
      say(sentence(`Not deleted: ${err.message}`), "error");
    }
  });
  S.fillPresetList = fillList;
  fillList();
  return box;
}

// ------------------------------------------------------------------ render and batch

async function postRender(body) {
  return api("/v1/renders", { method: "POST", json: { stem_id: S.stem.id, ...body } });
}

function buildActions() {
  const render = el("button", { type: "button", class: "btn btn-primary", "data-action": "render" }, "Render");
  const status = el("span", { class: "hint", role: "status", "data-part": "render-status" });
  render.addEventListener("click", async () => {
    if (!S.stem) return;
    let body;
    try { body = collect(); } catch (err) {
      if (!(err instanceof FieldProblem)) throw err;
      status.textContent = err.message;
      return;
    }
    render.disabled = true;
    status.textContent = "sending…";
    try {
      const job = await postRender(body);
      status.textContent = `Render queued (${job.id.slice(0, 8)}).`;
      bus.emit("renders-changed", { renderIds: [job.id] });
      bus.emit("notify", { message: "Render queued.", kind: "ok" });
    } catch (err) {
      status.textContent = "The server refused the render; see the marked settings.";
      showApiProblem(err);
    } finally {
      render.disabled = !S.stem;
    }
  });
  return el("div", { class: "settings-actions toolbar" }, render, status);
}

function checkList(title, items, name) {
  const list = el("div", { class: "check-list", role: "group", "aria-label": title, "data-batch": name },
    items.map(([value, text, disabled]) => el("label", { class: "check" },
      el("input", { type: "checkbox", value, disabled, "data-batch-item": name }), el("span", {}, text))));
  return el("div", { class: "batch-col" }, el("h3", {}, title), list);
}

function buildBatch() {
  const box = el("details", { class: "batch", "data-part": "batch" });
  const cols = el("div", { class: "batch-cols" });
  const count = el("p", { class: "hint", role: "status", "data-part": "batch-count" });
  const go = el("button", { type: "button", class: "btn", "data-action": "batch" }, "Render the batch");
  box.append(el("summary", {}, "Batch: several layouts, rooms or HRTF sets at once"),
    el("p", { class: "hint" }, `Tick any mix; one render is made per combination, the other settings as above (at most ${BATCH_MAX} at once).`),
    cols, el("div", { class: "toolbar" }, go, count));

  function refresh() {
    const ticked = new Set([...cols.querySelectorAll("input:checked")].map((i) => `${i.dataset.batchItem}|${i.value}`));
    cols.replaceChildren();
    // Scenes only where the stem's channel count is the scene's ((order + 1)^2).
    const fits = (l) => (isScene(l) ? Boolean(S.stem) && sceneFits(l, S.stem.channels) : !S.stem || l.speakers.length === S.stem.channels);
    const layouts = [
      ...builtinLayouts().map((l) => [`b:${l.name}`, isScene(l) ? `${l.name} (scene)` : l.name, !fits(l)]),
      ...presetsOf("layout").map((p) => [`p:${p.id}`, p.name, !fits(p.body)]),
    ].filter((x) => !x[2]);
    const rooms = (bus.state.catalog.rooms || []).map((r) => [r.name, r.name, false]);
    if (S.controls.get("room")?.isCustom()) rooms.push(["__custom", "the custom room above", false]);
    const sets = (bus.state.catalog.hrtfSets || []).map((s) => [s.id || s.name, s.name || s.id, false]);
    // An ADM master takes no layout: rooms and HRTF sets only.
    if (S.controls.has("layout") && !isAdm(S.stem)) cols.append(checkList("Layouts", layouts, "layout"));
    if (S.controls.has("room")) cols.append(checkList("Rooms", rooms, "room"));
    if (S.controls.has("hrtf")) cols.append(checkList("HRTF sets", sets, "hrtf"));
    for (const input of cols.querySelectorAll("input")) {
      if (ticked.has(`${input.dataset.batchItem}|${input.value}`)) input.checked = true;
    }
    counted();
  }

  function picks() {
    const out = {};
    for (const input of cols.querySelectorAll("input:checked")) (out[input.dataset.batchItem] ||= []).push(input.value);
    return out;
  }

  function counted() {
    const p = picks();
    const n = Object.values(p).reduce((acc, list) => acc * list.length, Object.keys(p).length ? 1 : 0);
    go.disabled = !S.stem || n < 1 || n > BATCH_MAX;
    go.textContent = n ? `Render ${n}` : "Render the batch";
    count.textContent = !n ? "Nothing ticked yet." : n > BATCH_MAX
      ? `${n} combinations: more than ${BATCH_MAX}; tick fewer.`
      : `${n} render${n > 1 ? "s" : ""} will be queued.`;
    return n;
  }

  cols.addEventListener("change", counted);
  go.addEventListener("click", async () => {
    let base;
    try { base = collect(); } catch (err) {
      if (!(err instanceof FieldProblem)) throw err;
      count.textContent = err.message;
      return;
    }
    const p = picks();
    const layouts = (p.layout || [null]).map((v) => (v === null ? undefined : v.startsWith("b:") ? v.slice(2) : (() => {
      const pre = presetById(v.slice(2));
      return pre ? { name: pre.body.name || pre.name, speakers: pre.body.speakers } : undefined;
    })()));
    const rooms = (p.room || [null]).map((v) => (v === "__custom" ? base.room : v));
    const sets = p.hrtf || [null];
    const bodies = [];
    for (const layout of layouts) for (const room of rooms) for (const hrtf of sets) {
      const body = { ...base };
      if (p.layout) {
        body.layout = layout;
        // A channel-by-channel order or a solo belongs to one layout; a named order is
        // kept where the other layout offers it.
        const named = S.controls.get("channel_order")?.namedOrder();
        const target = typeof layout === "string" ? builtinLayouts().find((l) => l.name === layout) : layout;
        delete body.channel_order;
        if (isScene(target)) {
          // a scene takes no channel order or fold; its own options come from the form
          delete body.fold;
          for (const name of SCENE_ONLY) {
            const v = S.controls.get(name)?.read();
            if (v !== undefined) body[name] = v;
          }
          if (body.solo && !(target.labels || []).includes(body.solo)) delete body.solo;
        } else {
          for (const name of SCENE_ONLY) delete body[name];
          if (named && target && target.orders && target.orders[named]) body.channel_order = named;
          if (body.solo && !(target && target.speakers.some((s) => s.label === body.solo))) delete body.solo;
        }
      }
      if (p.room && room !== null) body.room = room;
      if (p.hrtf && hrtf !== null) body.hrtf = hrtf;
      bodies.push(body);
    }
    if (bodies.length > BATCH_MAX) return;
    go.disabled = true;
    const made = [];
    const failed = [];
    for (const [i, body] of bodies.entries()) {
      count.textContent = `sending ${i + 1} of ${bodies.length}…`;
      try {
        made.push((await postRender(body)).id);
      } catch (err) {
        const { fields, general } = problemsByField(err, labelOf, new Set(S.controls.keys()));
        failed.push([...fields.values(), general].filter(Boolean).join(" ") || err.message);
        if (err.status === 429) break;
      }
    }
    bus.emit("renders-changed", { renderIds: made });
    counted();
    count.textContent = `${made.length} of ${bodies.length} render${bodies.length > 1 ? "s" : ""} queued.` +
      (failed.length ? ` Refused: ${[...new Set(failed)].join(" ")}` : "");
    bus.emit("notify", { message: `Batch: ${made.length} render${made.length === 1 ? "" : "s"} queued.`, kind: failed.length ? "warn" : "ok" });
  });
  S.refreshBatch = refresh;
  refresh();
  return box;
}

// ------------------------------------------------------------------ mount

/** Refresh the lists that come from catalogues (layouts, HRTF sets, rooms, EQ files),
    keeping what is chosen. */
function refreshLists() {
  for (const name of ["layout", "channel_order", "solo", "hrtf", "headphone_eq"]) S.controls.get(name)?.refresh();
  S.refreshBatch && S.refreshBatch();
}

/** The forms' style sheet, added once (the desk's page links only the shell's). */
export function ensureStyles() {
  if (document.querySelector("link[data-style='desk-forms']")) return;
  document.head.append(el("link", { rel: "stylesheet", href: "/static/desk-forms.css", "data-style": "desk-forms" }));
}

function snapshot() {
  const values = {};
  for (const [name, ctrl] of S.controls) {
    try {
      const v = ctrl.read();
      if (v !== undefined) values[name] = v;
    } catch { /* an unfinished field starts from its default */ }
  }
  return values;
}

export async function mountSettings(el0) {
  S.root = el0;
  el0.classList.add("settings-panel");
  S.stem = bus.state.stem;
  ensureStyles();
  bus.on("settings-layout-changed", () => S.controls.get("room")?.onLayout?.());
  const firstBuild = () => {
    const had = S.controls.size ? snapshot() : null;
    build();
    S.optionsRef = bus.state.catalog.options;
    if (had && S.controls.size) fill(had);
  };
  bus.on("catalog-changed", async () => {
    S.catalogSeen = true;
    if (S.controls.size && bus.state.catalog.options === S.optionsRef) {
      // Same declaration: only the lists changed (an uploaded set, a saved layout).
      refreshLists();
      return;
    }
    firstBuild();
    // A catalogue read again (e.g. after a token was given) may now let these through.
    await Promise.all([loadPresets({ fresh: true }), loadEqFiles()]);
    if (S.controls.size) { refreshLists(); S.fillPresetList && S.fillPresetList(); }
  });
  bus.on("stem-selected", ({ stem }) => {
    S.stem = stem || null;
    if (!S.controls.size) return;
    S.controls.get("adm_programme")?.refresh();
    S.controls.get("layout")?.refresh();
    for (const name of ["channel_order", "solo"]) S.controls.get(name)?.refresh();
    S.refreshBatch && S.refreshBatch();
    bus.emit("settings-layout-changed", {});
    showStem();
  });
  bus.on("presets-changed", () => {
    if (!S.controls.size) return;
    S.controls.get("layout")?.refresh();
    S.fillPresetList && S.fillPresetList();
    S.refreshBatch && S.refreshBatch();
  });
  bus.on("settings-load", ({ request }) => {
    if (!request || !S.controls.size) return;
    bus.emit("tab-select", { name: "settings" });
    const notes = fill(request);
    const status = S.root.querySelector("[data-part='render-status']");
    if (status) status.textContent = notes.length ? `Settings of the render loaded. ${notes.join(" ")}` : "Settings of the render loaded.";
  });
  bus.on("layout-use", ({ presetId }) => {
    bus.emit("tab-select", { name: "settings" });
    S.controls.get("layout")?.selectPreset(presetId);
    for (const name of ["channel_order", "solo"]) S.controls.get(name)?.refresh();
  });
  build();
  await Promise.all([loadPresets(), loadEqFiles()]);
  // The desk may have read its catalogue before this panel listened for it.
  const c = bus.state.catalog;
  if (c.options || c.layouts || c.rooms || c.hrtfSets) S.catalogSeen = true;
  firstBuild();
}
