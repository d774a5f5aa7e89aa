// The desk's "Blind tests" tab: the caller's blind comparisons (GET /v1/comparisons) with
// their state, design, answered trials, a link to /compare/{id} and delete; and a form to
// start one from the selected stem's finished renders (their request options become the
// variants). The form shows only when the stem has at least two finished renders; every
// limit (excerpt length, trials, number of variants, designs) comes from GET /v1/options
// ("comparison"), none is written here.
//
// Listens to: stem-selected, renders-changed, catalog-changed, tab, compare-renders
// {renderIds} (preselects those renders and opens this tab).

import { api } from "./api.js";
import { el } from "./dom.js";
import { bus } from "./bus.js";
import { askToken } from "./chrome.js";

const POLL_MS = 1500;
const DESIGN_NAMES = { ab: "A/B preference", abx: "ABX" };
const DESIGN_HELP = {
  ab: "Which do you prefer? Two or more variants in pairs; “no preference” is an answer.",
  abx: "Is X the same as A or as B? Exactly two variants; forced choice, tests whether a difference is heard at all.",
};
const STATE_NAMES = { preparing: "preparing", ready: "ready to listen", finished: "finished", failed: "failed" };


function when(iso) {
  if (!iso) return "";
  const d = new Date(iso);
  return Number.isNaN(d.getTime()) ? iso : d.toLocaleString(undefined, { dateStyle: "short", timeStyle: "short" });
}

function stemName(stem) {
  if (!stem) return "";
  const files = stem.files || [];
  return files.length ? files[0].name + (files.length > 1 ? ` + ${files.length - 1}` : "") : stem.id.slice(0, 8);
}

/** Ambisonic decoders in words (as the comparison summaries word them). */
const DECODER_WORDS = { magls: "MagLS decoder", virtual: "virtual-loudspeaker decoder" };

/** A rotation ([yaw, pitch, roll] or "yaw,pitch,roll" in degrees) in words. */
function rotationWords(v) {
  const a = (Array.isArray(v) ? v : String(v).split(",")).map(Number);
  if (a.some((x) => !Number.isFinite(x))) return `rotate ${v}`;
  const [yaw = 0, pitch = 0, roll = 0] = a;
  if (!yaw && !pitch && !roll) return "not rotated";
  return pitch || roll ? `rotated ${yaw}, ${pitch}, ${roll}° (yaw, pitch, roll)` : `rotated ${yaw}°`;
}

function describeValue(key, v) {
  if (key === "layout" && typeof v === "string") {
    const m = /^(foa|hoa([2-7]))$/i.exec(v);
    if (m) return `order ${m[2] || 1} scene`;
  }
  if (key === "ambisonic_decoder") return DECODER_WORDS[v] || `decoder ${v}`;
  if (key === "rotate") return rotationWords(v);
  if (key === "layout") return typeof v === "object" ? `layout ${v.name || "custom"}` : String(v);
  if (key === "room") return typeof v === "object" ? `room ${v.name || "custom"}` : v === "none" ? "no room" : `room ${v}`;
  if (key === "hrtf") return `HRTF ${String(v).length === 32 ? `upload ${v.slice(0, 8)}` : v}`;
  if (typeof v === "object") return `${key.replaceAll("_", " ")} ${Array.isArray(v) ? `(${v.length})` : "custom"}`;
  return `${key.replaceAll("_", " ")} ${v}`;
}

/**
 * Short summaries of renders that tell them apart: the layout, then each sound-shaping
 * option whose value differs between the renders (the rest is common to all of them).
 */
export function describeRenders(renders, soundOptions) {
  const keys = (soundOptions && soundOptions.length ? soundOptions
    : [...new Set(renders.flatMap((r) => Object.keys(r.request)))]).filter((k) => k !== "stem_id" && k !== "name");
  const differs = keys.filter((k) => new Set(renders.map((r) => JSON.stringify(r.request[k] ?? null))).size > 1);
  return renders.map((r) => {
    const parts = [];
    if (r.request.layout !== undefined && r.request.layout !== null) parts.push(describeValue("layout", r.request.layout));
    for (const k of differs) {
      const v = r.request[k];
      if (k === "layout" || v === null || v === undefined) continue;
      parts.push(describeValue(k, v));
    }
    return parts.join(" · ") || "defaults";
  });
}

/** Link blind.css once (the desk's page does not know this tab's styles). */
function linkStyles() {
  if (document.querySelector('link[data-earfold="blind"]')) return;
  document.head.append(el("link", { rel: "stylesheet", href: "/static/blind.css", "data-earfold": "blind" }));
}

export function mountBlindTests(root) {
  linkStyles();
  const state = {
    comparisons: [], renders: [], stems: new Map(), picked: new Set(), preselect: null,
    pollTimer: null, busy: false, listError: null,
  };

  // ------------------------------------------------------------------- skeleton
  const formBox = el("section", { class: "blind-new", "aria-labelledby": "blind-new-title" });
  const listBox = el("section", { class: "blind-list", "aria-labelledby": "blind-list-title" });
  const listBody = el("div", { id: "blind-list-body" });
  listBox.append(
    el("div", { class: "toolbar blind-head" }, el("h3", { id: "blind-list-title" }, "Your blind tests"),
      el("span", { class: "spacer" }),
      el("button", { type: "button", class: "btn btn-quiet btn-small", id: "blind-refresh", onclick: () => refreshList() }, "refresh")),
    listBody);
  root.replaceChildren(listBox, formBox);
  root.classList.add("blind-tests");

  function options() {
    const o = bus.state.catalog.options;
    return o && o.comparison ? o.comparison : null;
  }

  // -------------------------------------------------------------------- the list
  function renderList() {
    const items = state.comparisons;
    if (state.listError) {
      listBody.replaceChildren(el("p", { class: "error", role: "alert" }, `The blind tests cannot be listed: ${state.listError}`));
      return;
    }
    if (!items.length) {
      listBody.replaceChildren(el("p", { class: "muted", id: "blind-empty" },
        "No blind tests yet. Render a stem at least twice with different settings, then start one above."));
      return;
    }
    const stem = bus.state.stem;
    const table = el("table", { class: "table", id: "blind-table" },
      el("thead", {}, el("tr", {},
        el("th", { scope: "col" }, "Test"), el("th", { scope: "col" }, "Design"),
        el("th", { scope: "col" }, "State"), el("th", { scope: "col", class: "num" }, "Answered"),
        el("th", { scope: "col" }, el("span", { class: "visually-hidden" }, "Actions")))));
    const body = el("tbody");
    for (const c of items) {
      const names = (c.variants || []).map((v) => v.name || "variant").join(" vs ");
      const mine = stem && c.stem_id === stem.id;
      const stemText = c.stem_name || state.stems.get(c.stem_id) || (mine ? stemName(stem) : "");
      const said = (c.variants || []).map((v) => `${v.name}: ${v.summary || "render defaults"}`).join("\n");
      const stateText = c.state === "preparing" ? `preparing ${Math.round((c.progress || 0) * 100)} %` : STATE_NAMES[c.state] || c.state;
      const open = el("a", { class: "btn btn-small open-test", href: c.links && c.links.page ? c.links.page : `/compare/${c.id}` },
        c.state === "finished" ? "Results" : "Open");
      const del = el("button", { type: "button", class: "btn btn-quiet btn-small delete-test", "aria-label": `Delete blind test ${names}` }, "delete");
      del.addEventListener("click", () => remove(c, names));
      body.append(el("tr", { "data-id": c.id, class: mine ? "this-stem" : null },
        el("td", {}, el("div", { class: "blind-names", title: said || null }, names),
          el("div", { class: "hint" }, [stemText, when(c.created)].filter(Boolean).join(" · "))),
        el("td", {}, DESIGN_NAMES[c.mode] || c.mode),
        el("td", {}, el("span", { class: `chip ${c.state === "failed" ? "error" : c.state === "finished" ? "ok" : c.state === "ready" ? "note" : ""}`,
          title: c.message || null }, stateText)),
        el("td", { class: "num" }, `${c.answered ?? 0} / ${c.trial_count ?? "?"}`),
        el("td", { class: "actions" }, open, del)));
    }
    table.append(body);
    listBody.replaceChildren(table);
  }

  async function refreshList() {
    clearTimeout(state.pollTimer);
    try {
      state.comparisons = await api("/v1/comparisons");
      state.listError = null;
    } catch (err) {
      if (err.status === 401 && err.tokenChanged) {
        refreshList(); // sent before the token was given: ask again with it
        return;
      }
      if (err.status === 401) {
        // The token prompt is open (chrome.js); list again once a token is given.
        state.listError = "this server needs an API token";
        renderList();
        askToken().then(() => { refreshList(); refreshRenders(); });
        return;
      }
      state.listError = err.status === 404 ? "this server has no blind tests (GET /v1/comparisons answered 404)" : err.message;
      if (err.status === 0) {
        // Not reached (a busy or restarting server, a dropped connection): say so and try
        // again, so the list comes back by itself.
        renderList();
        state.pollTimer = setTimeout(refreshList, 2 * POLL_MS);
        return;
      }
    }
    // Older servers do not name the stem in the list: look the names up once.
    const unknown = [...new Set(state.comparisons.filter((c) => !c.stem_name).map((c) => c.stem_id))]
      .filter((id) => id && !state.stems.has(id));
    if (unknown.length) {
      try {
        for (const s of await api("/v1/stems")) state.stems.set(s.id, stemName(s));
      } catch { /* names are a nicety */ }
    }
    renderList();
    if (state.comparisons.some((c) => c.state === "preparing")) state.pollTimer = setTimeout(refreshList, POLL_MS);
  }

  async function remove(c, names) {
    if (!confirm(`Delete the blind test “${names}” and its answers?`)) return;
    try {
      await api(`/v1/comparisons/${c.id}`, { method: "DELETE" });
      bus.emit("notify", { message: "Blind test deleted.", kind: "ok" });
    } catch (err) {
      bus.emit("notify", { message: `The blind test was not deleted: ${err.message}`, kind: "error" });
    }
    refreshList();
  }

  // -------------------------------------------------------------------- the form
  async function refreshRenders() {
    const stem = bus.state.stem;
    if (!stem) { state.renders = []; renderForm(); return; }
    try {
      const all = await api("/v1/renders?limit=1000");
      // Oldest first: the order the engineer made them in.
      state.renders = all.filter((r) => r.request && r.request.stem_id === stem.id && r.state === "done")
        .sort((a, b) => String(a.created).localeCompare(String(b.created)));
    } catch (err) {
      state.renders = [];
      formBox.replaceChildren(el("p", { class: "error" }, `The renders cannot be read: ${err.message}`));
      return;
    }
    if (state.preselect) {
      state.picked = new Set(state.preselect.filter((id) => state.renders.some((r) => r.id === id)));
      state.preselect = null;
    }
    for (const id of [...state.picked]) if (!state.renders.some((r) => r.id === id)) state.picked.delete(id);
    renderForm();
  }

  function field(label, input, hint, id) {
    return el("div", { class: "field" }, el("label", { for: id }, label), input, hint ? el("p", { class: "hint", id: `${id}-hint` }, hint) : null);
  }

  function renderForm() {
    const stem = bus.state.stem;
    const limits = options();
    formBox.replaceChildren(el("h3", { id: "blind-new-title" }, "New blind test"));
    if (!stem) {
      formBox.append(el("p", { class: "muted", id: "blind-no-form" }, "Choose a stem to start a blind test of its renders."));
      return;
    }
    if (state.renders.length < 2) {
      formBox.append(el("p", { class: "muted", id: "blind-no-form" },
        `A blind test compares finished renders of one stem: ${stemName(stem)} has ${state.renders.length} ` +
        `finished render${state.renders.length === 1 ? "" : "s"}. Render it again with other settings (at least two in all).`));
      return;
    }
    if (!limits) {
      formBox.append(el("p", { class: "warn", id: "blind-no-form" },
        "This server does not say its blind-test limits (GET /v1/options has no “comparison” part), so the form cannot be offered."));
      return;
    }
    const soundOptions = limits.variant_options || [];
    const summaries = describeRenders(state.renders, soundOptions);
    // Renders whose sound-shaping options are all alike: the API refuses them as a pair.
    const soundKey = (r) => JSON.stringify(soundOptions.map((k) => r.request[k] ?? null));
    const keyCount = new Map();
    for (const r of state.renders) keyCount.set(soundKey(r), (keyCount.get(soundKey(r)) || 0) + 1);
    const form = el("form", { id: "blind-form", novalidate: true });
    // Variants: one checkbox per finished render, with a name for the results.
    const list = el("div", { class: "blind-variants", role: "group", "aria-labelledby": "blind-variants-label" });
    state.renders.forEach((r, i) => {
      const summary = summaries[i];
      const id = `blind-pick-${r.id}`;
      const box = el("input", { type: "checkbox", id, value: r.id, "data-render": r.id });
      box.checked = state.picked.has(r.id);
      box.addEventListener("change", () => { if (box.checked) state.picked.add(r.id); else state.picked.delete(r.id); check(); });
      const name = el("input", { type: "text", class: "variant-name", maxlength: 64, value: summary.slice(0, 64),
        "aria-label": `Name of variant ${summary} in the results`, "data-render": r.id });
      list.append(el("div", { class: "blind-variant" },
        el("label", { for: id }, box, " ", el("span", {}, summary), el("span", { class: "hint" }, ` · ${when(r.finished || r.created)}`),
          keyCount.get(soundKey(r)) > 1 ? el("span", { class: "chip note same-sound", title:
            "Another finished render has the same sound-shaping settings (they differ only in level or file format): comparing the two measures nothing." },
          "same sound as another") : null),
        name));
    });
    const designs = limits.designs || [];
    const designBox = el("div", { class: "blind-designs", role: "radiogroup", "aria-labelledby": "blind-design-label" });
    for (const d of designs) {
      const radio = el("input", { type: "radio", name: "design", value: d, id: `blind-design-${d}` });
      radio.checked = d === (limits.design_default || designs[0]);
      radio.addEventListener("change", check);
      designBox.append(el("label", { for: radio.id, class: "blind-design" }, radio, ` ${DESIGN_NAMES[d] || d}`,
        DESIGN_HELP[d] ? el("span", { class: "hint" }, ` ${DESIGN_HELP[d]}`) : null));
    }
    const trials = el("input", { type: "number", id: "blind-trials", min: limits.trials_min, max: limits.trials_max,
      step: 1, value: limits.trials_default, required: true });
    const duration = Number(stem.duration_s) || (stem.frames && stem.samplerate ? stem.frames / stem.samplerate : Infinity);
    const minLen = limits.excerpt_min_seconds ?? 0;
    // No longer than the API allows nor than the stem (a stem shorter than the shortest
    // excerpt plays whole: the API clips the length to the stem).
    const maxLen = Math.max(minLen, Math.min(limits.excerpt_max_seconds, Math.floor(duration * 10) / 10));
    const length = el("input", { type: "number", id: "blind-length", min: minLen, max: maxLen, step: 0.5,
      value: Math.min(limits.excerpt_default_seconds, maxLen), required: true });
    const start = el("input", { type: "number", id: "blind-start", min: 0, step: 0.5, placeholder: "loudest part" });
    const message = el("p", { class: "error", id: "blind-form-message", role: "alert", hidden: true });
    const submit = el("button", { type: "submit", class: "btn btn-primary", id: "blind-start-button" }, "Start the blind test");
    form.append(
      el("p", { class: "label", id: "blind-variants-label" }, el("strong", {}, "Variants"),
        el("span", { class: "hint" }, ` (${limits.min_variants ?? 2} to ${limits.max_variants}; renders of ${stemName(stem)}; the excerpts are level-matched)`)),
      list,
      el("fieldset", {}, el("legend", { id: "blind-design-label" }, "Design"), designBox),
      el("div", { class: "blind-numbers" },
        field("Trials", trials, `${limits.trials_min} to ${limits.trials_max}`, "blind-trials"),
        field("Excerpt length (s)", length, `${minLen} to ${maxLen} s`, "blind-length"),
        field("Excerpt start (s)", start, "blank: the loudest part", "blind-start")),
      message,
      el("div", { class: "toolbar" }, submit));
    form.addEventListener("submit", (ev) => { ev.preventDefault(); create(form); });
    formBox.append(form);

    function check() {
      const n = state.picked.size;
      const design = form.querySelector("input[name=design]:checked");
      let problem = "";
      if (design && design.value === "abx" && n !== 2 && n > 0) problem = "ABX compares exactly two variants: pick two.";
      else if (n > limits.max_variants) problem = `Pick at most ${limits.max_variants} variants.`;
      message.hidden = !problem;
      message.textContent = problem;
      return problem;
    }
    check();
  }

  function formProblem(form, limits) {
    const n = state.picked.size;
    const design = (form.querySelector("input[name=design]:checked") || {}).value;
    const trials = Number(form.querySelector("#blind-trials").value);
    const length = Number(form.querySelector("#blind-length").value);
    const startText = form.querySelector("#blind-start").value.trim();
    const lengthBox = form.querySelector("#blind-length");
    const minLen = Number(lengthBox.min), maxLen = Number(lengthBox.max);
    if (n < (limits.min_variants ?? 2)) return `Pick at least ${limits.min_variants ?? 2} renders to compare.`;
    if (n > limits.max_variants) return `Pick at most ${limits.max_variants} variants.`;
    if (!design) return "Choose a design.";
    if (design === "abx" && n !== 2) return "ABX compares exactly two variants: pick two.";
    if (!Number.isInteger(trials) || trials < limits.trials_min || trials > limits.trials_max) {
      return `Trials: a whole number from ${limits.trials_min} to ${limits.trials_max}.`;
    }
    if (!(length >= minLen && length <= maxLen)) return `Excerpt length: from ${minLen} to ${maxLen} s.`;
    if (startText !== "") {
      const start = Number(startText);
      const duration = maxLen >= limits.excerpt_max_seconds ? Infinity : maxLen;
      if (!(start >= 0)) return "Excerpt start: a number of seconds, 0 or more (or blank for the loudest part).";
      if (start + length > duration + 1e-6) return `The excerpt (${start} s + ${length} s) runs past the end of the stem.`;
    }
    return "";
  }

  async function create(form) {
    const limits = options();
    const message = form.querySelector("#blind-form-message");
    const problem = formProblem(form, limits);
    if (problem) {
      message.textContent = problem;
      message.hidden = false;
      return;
    }
    const soundOptions = new Set(limits.variant_options || []);
    const variants = state.renders.filter((r) => state.picked.has(r.id)).map((r) => {
      const v = {};
      for (const [k, val] of Object.entries(r.request)) if (soundOptions.has(k) && val !== null && val !== undefined) v[k] = val;
      const name = form.querySelector(`input.variant-name[data-render="${r.id}"]`).value.trim();
      if (name) v.name = name.slice(0, 64);
      return v;
    });
    const startText = form.querySelector("#blind-start").value.trim();
    const body = {
      stem_id: bus.state.stem.id,
      mode: form.querySelector("input[name=design]:checked").value,
      trials: Number(form.querySelector("#blind-trials").value),
      excerpt: { length: Number(form.querySelector("#blind-length").value), ...(startText ? { start: Number(startText) } : {}) },
      variants,
    };
    const button = form.querySelector("#blind-start-button");
    button.disabled = true;
    message.hidden = true;
    try {
      const view = await api("/v1/comparisons", { method: "POST", json: body });
      bus.emit("notify", { message: "Blind test started: its excerpts are being prepared.", kind: "ok" });
      state.picked.clear();
      renderForm();
      await refreshList();
      const row = listBody.querySelector(`tr[data-id="${view.id}"]`);
      if (row) row.scrollIntoView({ block: "nearest" });
    } catch (err) {
      // The API's own sentence (problem "detail"): it names what is wrong, e.g. the two
      // variants that would render identically.
      message.textContent = err.status === 422 || err.status === 400 || err.status === 404
        ? `Not started: ${err.message}` : `The blind test was not started: ${err.message}`;
      message.hidden = false;
      button.disabled = false;
    }
  }

  // ------------------------------------------------------------------- wiring
  bus.on("stem-selected", () => { state.picked.clear(); refreshRenders(); renderList(); });
  bus.on("renders-changed", () => refreshRenders());
  bus.on("catalog-changed", () => renderForm());
  bus.on("tab", ({ name }) => { if (name === "blind") { refreshList(); refreshRenders(); } });
  bus.on("compare-renders", ({ renderIds }) => {
    state.preselect = [...(renderIds || [])];
    bus.emit("tab-select", { name: "blind" });
    refreshRenders().then(() => formBox.scrollIntoView({ block: "start" }));
  });

  renderForm();
  refreshRenders();
  refreshList();
}
