// The desk: entry module of "/". Builds the shared header, loads the server's catalogues
// into bus.state.catalog, mounts the panels (stems, settings, speakers, blind tests,
// renders, player), runs the centre tabs and the desk-wide keys, and keeps the selected
// stem and tab in the URL hash.
//
// A panel module that fails to load (not there yet, or broken) leaves a short message in
// its place instead of stopping the desk.
//
// Test hook: window.earfoldDesk = { bus, state, player } (player is set by listen.js).

import { api } from "./api.js";
import { bus } from "./bus.js";
import { mountChrome, notify } from "./chrome.js";
import { readHash, writeHash } from "./hash.js";

function stemNameOf(stem) {
  const files = (stem.files || []).map((f) => f.name);
  return files.length === 1 ? files[0] : files.length ? `${files[0]} + ${files.length - 1}` : "";
}

const TABS = ["settings", "speakers", "blind"];
const TAB_NAMES = { settings: "Settings", speakers: "Speakers", blind: "Blind tests" };

window.earfoldDesk = { bus, state: bus.state, player: null };

bus.on("notify", ({ message, kind }) => notify(message, kind || "info"));

function selectTab(name, { focus = false } = {}) {
  if (!TABS.includes(name)) name = "settings";
  for (const tab of TABS) {
    const button = document.getElementById(`tab-${tab}`);
    const view = document.getElementById(`view-${tab}`);
    const on = tab === name;
    button.setAttribute("aria-selected", on ? "true" : "false");
    button.tabIndex = on ? 0 : -1;
    view.hidden = !on;
    if (on && focus) button.focus();
  }
  writeHash({ tab: name === "settings" ? "" : name });
  bus.emit("tab", { name });
}

function currentTab() {
  return TABS.find((t) => document.getElementById(`tab-${t}`).getAttribute("aria-selected") === "true");
}

function wireTabs() {
  const list = document.querySelector(".desk-centre .tabs");
  list.addEventListener("click", (event) => {
    const button = event.target.closest("[data-tab]");
    if (button) selectTab(button.dataset.tab);
  });
  list.addEventListener("keydown", (event) => {
    const step = { ArrowRight: 1, ArrowLeft: -1 }[event.key];
    if (!step) return;
    event.preventDefault();
    const i = TABS.indexOf(currentTab());
    selectTab(TABS[(i + step + TABS.length) % TABS.length], { focus: true });
  });
  bus.on("tab-select", ({ name }) => selectTab(name));
}

function typing(target) {
  return target && (target.isContentEditable || /^(INPUT|SELECT|TEXTAREA)$/.test(target.tagName));
}

function wireKeys() {
  // Desk-wide keys; the player adds its own (Space, 1-9, S, L, arrows).
  document.addEventListener("keydown", (event) => {
    if (event.defaultPrevented || event.ctrlKey || event.metaKey || event.altKey || typing(event.target)) return;
    if (event.key === "[" || event.key === "]") {
      const i = TABS.indexOf(currentTab());
      selectTab(TABS[(i + (event.key === "]" ? 1 : -1) + TABS.length) % TABS.length]);
      event.preventDefault();
    }
  });
}

async function loadCatalog() {
  const sources = { layouts: "/v1/layouts", rooms: "/v1/rooms", hrtfSets: "/v1/hrtf-sets", options: "/v1/options" };
  await Promise.all(Object.entries(sources).map(async ([key, path]) => {
    try {
      bus.state.catalog[key] = await api(path);
    } catch (err) {
      bus.state.catalog[key] = null;
      if (err.status !== 401) console.warn(`earfold desk: ${path} answered ${err.status}: ${err.message}`);
    }
  }));
  bus.emit("catalog-changed", { catalog: bus.state.catalog });
}

async function mount(mountId, module, fn, label) {
  const target = document.getElementById(mountId);
  try {
    const loaded = await import(module);
    if (typeof loaded[fn] !== "function") throw new Error(`${module} has no ${fn}()`);
    await loaded[fn](target);
  } catch (err) {
    console.warn(`earfold desk: ${label} is not available`, err);
    target.replaceChildren();
    const p = document.createElement("p");
    p.className = "coming";
    p.textContent = `${label}: coming (this part of the desk is not available in this build).`;
    target.append(p);
  }
}

async function start() {
  const chrome = mountChrome({ title: "", current: "desk", caution: false });
  wireTabs();
  wireKeys();
  const place = readHash();
  selectTab(place.tab || "settings");
  bus.on("stem-selected", ({ stem }) => {
    bus.state.stem = stem || null;
    writeHash({ stem: stem ? stem.id : "" });
    chrome.setTitle(stem ? stemNameOf(stem) : "");
  });
  const catalog = loadCatalog();
  window.addEventListener("earfold-token", () => {
    loadCatalog();
    bus.emit("stems-refresh", {});
    bus.emit("renders-refresh", {});
  });
  await Promise.all([
    mount("mount-stems", "./stems.js", "mountStems", "Stems"),
    mount("view-settings", "./settings.js", "mountSettings", TAB_NAMES.settings),
    mount("view-speakers", "./layout-editor.js", "mountLayoutEditor", TAB_NAMES.speakers),
    mount("view-blind", "./blind.js", "mountBlindTests", TAB_NAMES.blind),
    mount("mount-renders", "./renders.js", "mountRenders", "Renders"),
    mount("mount-listen", "./listen.js", "mountListen", "Player"),
    catalog,
  ]);
  document.body.dataset.ready = "1";
}

start();
