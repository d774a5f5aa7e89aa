// The player bar at the bottom of the desk.
//
// (a) Stream: one <audio> element plays a render from its row. Its source is a signed link
//     (POST /v1/renders/{id}/listen), so the browser streams it with Range requests and
//     playback starts before the file is fully downloaded.
// (b) A/B: the chosen renders of one stem (and the reference) are fetched as the same
//     window of time (GET /v1/renders/{id}/window?start=&seconds=), decoded, and started on
//     one AudioContext time so they stay sample-aligned; each goes through its own gain
//     node, and switching only changes gains (5 ms ramp), so the switch is instant and
//     aligned. Each source is loudness-matched to the quietest from its report's integrated
//     output loudness. Loop region (in/out, toggle), seek bar, position readout.
//     The reference is the stem's plain stereo fold-down (a render with fold "stereo" and
//     the first A/B render's layout, channel order and loudness), made once and reused.
//
// Playback starts at a reduced level (-20 dB on the master gain) with the hearing caution
// beside the volume control.
//
// Keys (when no text field has focus): Space play/pause, 1-9 pick a source, S next source,
// L loop on/off, I / O set the loop's in / out at the playhead, ← → seek 5 s (Shift: 1 s).
//
// Test hook: window.earfoldDesk.player = { positions(), sources(), state() };
// positions() maps each loaded source's key to its playing position in frames.

import { api, tokenHeaders, blobUrl } from "./api.js";
import { bus } from "./bus.js";
import { CAUTION_TEXT } from "./chrome.js";
import { el, fmtClock, fmtDb } from "./dom.js";
import { describeRequest, isAdmRequest, postRender, renderById, renderLoudness, rendersOf } from "./renders.js";

const START_DB = -20;
const RAMP_S = 0.005;
const WINDOW_S = 45;
const WINDOW_LEAD_S = 10;
const LETTERS = "ABCDEFGH";
const MAX_SOURCES = 8;

const ui = {};
const ab = {
  ids: [], // render ids in the switcher (reference excluded)
  referenceId: null,
  ctx: null,
  master: null,
  sources: [], // { key, renderId, label, buffer, gainNode, node, match, start, offset }
  active: 0,
  playing: false,
  windowStart: 0, // seconds
  windowFrames: 0,
  rate: 48000,
  duration: 0, // seconds of the longest source
  anchorTime: 0, // ctx time at which the current run started
  anchorPos: 0, // position (seconds, absolute) at anchorTime
  loop: { on: false, in: null, out: null },
  loadToken: 0,
  note: "",
};
let mode = "idle"; // "idle" | "stream" | "ab"
let masterDb = START_DB;
let streamId = null;

// ---------- shared level ----------

function masterLinear() {
  return masterDb <= -60 ? 0 : 10 ** (masterDb / 20);
}

function setMaster(db) {
  masterDb = Math.max(-60, Math.min(0, db));
  ui.volume.value = String(masterDb);
  ui.volumeText.textContent = masterDb <= -60 ? "off" : `${fmtDb(masterDb, 0)} dB`;
  ui.audio.volume = masterLinear();
  if (ab.master) ab.master.gain.setTargetAtTime(masterLinear(), ab.ctx.currentTime, 0.01);
}

// ---------- stream player ----------

async function playStream(renderId) {
  stopAb();
  mode = "stream";
  streamId = renderId;
  const r = renderById(renderId);
  ui.nowPlaying.textContent = r ? `▶ ${describeRequest(r.request)}` : "▶ render";
  ui.streamNote.hidden = true;
  let src;
  try {
    const link = await api(`/v1/renders/${renderId}/listen`, { method: "POST" });
    src = link.url;
  } catch (err) {
    if (err.status === 404 || err.status === 405) {
      // Without signed links the audio must come through fetch (token header), whole.
      ui.streamNote.hidden = false;
      ui.streamNote.textContent = "this server has no listening links: the whole file is fetched first";
      try {
        src = await blobUrl(`/v1/renders/${renderId}/audio`);
      } catch (err2) {
        bus.emit("notify", { message: `Cannot play: ${err2.message}`, kind: "error" });
        return;
      }
    } else {
      bus.emit("notify", { message: `Cannot play: ${err.message}`, kind: "error" });
      return;
    }
  }
  if (streamId !== renderId) return;
  ui.audio.src = src;
  ui.audio.volume = masterLinear();
  try {
    await ui.audio.play();
  } catch (err) {
    ui.streamNote.hidden = false;
    ui.streamNote.textContent = `press play to start (${err.message})`;
  }
  drawState();
}

function stopStream() {
  if (!ui.audio.paused) ui.audio.pause();
}

// ---------- A/B ----------

function setAbIds(ids) {
  const clean = [...new Set(ids)].slice(0, MAX_SOURCES);
  ab.ids = clean;
  bus.emit("ab-changed", { renderIds: [...ab.ids] });
  drawSwitcher();
  if (ab.ids.length || ab.referenceId) loadWindow(ab.playing ? position() : ab.anchorPos);
  else {
    stopAb();
    ab.sources = [];
    drawState();
  }
}

function toggleAb(renderId) {
  const r = renderById(renderId);
  if (!r) return;
  if (ab.ids.includes(renderId)) {
    setAbIds(ab.ids.filter((x) => x !== renderId));
    return;
  }
  const stemId = r.request && r.request.stem_id;
  const others = ab.ids.map(renderById).filter(Boolean);
  if (others.length && others[0].request.stem_id !== stemId) {
    ab.referenceId = null;
    setAbIds([renderId]);
    bus.emit("notify", { message: "The A/B switcher holds renders of one stem: it now starts again with this one.", kind: "info" });
    return;
  }
  if (ab.ids.length >= MAX_SOURCES) {
    bus.emit("notify", { message: `At most ${MAX_SOURCES} renders in the switcher.`, kind: "warn" });
    return;
  }
  setAbIds([...ab.ids, renderId]);
}

/** The switcher's sources; with `ready`, only those whose render is done (loadable). */
function sourceList({ ready = false } = {}) {
  const list = ab.ids.map((id, i) => ({ key: id, renderId: id, label: LETTERS[i] || String(i + 1) }));
  if (ab.referenceId) list.push({ key: "reference", renderId: ab.referenceId, label: "reference" });
  if (!ready) return list;
  return list.filter((s) => { const r = renderById(s.renderId); return r && r.state === "done"; });
}

async function ensureContext(rate) {
  if (ab.ctx && ab.ctx.sampleRate === rate) return ab.ctx;
  if (ab.ctx) {
    try { await ab.ctx.close(); } catch { /* already closed */ }
  }
  ab.ctx = new AudioContext({ sampleRate: rate, latencyHint: "interactive" });
  ab.master = ab.ctx.createGain();
  ab.master.gain.value = masterLinear();
  ab.master.connect(ab.ctx.destination);
  return ab.ctx;
}

async function fetchWindow(renderId, start, seconds) {
  const path = `/v1/renders/${renderId}/window?start=${start.toFixed(3)}&seconds=${seconds}`;
  let response = await fetch(path, { headers: tokenHeaders() });
  if (response.status === 404 || response.status === 405) {
    const text = await response.text();
    if (/no such resource|Not Found/.test(text)) {
      // No window endpoint on this server: the whole file instead (start is then 0).
      ab.note = "this server cannot send windows: whole files are loaded";
      response = await fetch(`/v1/renders/${renderId}/audio`, { headers: tokenHeaders() });
      if (!response.ok) throw new Error(`the audio answered ${response.status}`);
      return { data: await response.arrayBuffer(), start: 0 };
    }
    throw new Error(text.slice(0, 200));
  }
  if (!response.ok) {
    let detail = `${response.status}`;
    try { detail = (await response.json()).detail || detail; } catch { /* keep status */ }
    throw new Error(detail);
  }
  return { data: await response.arrayBuffer(), start };
}

async function loadWindow(around) {
  const list = sourceList({ ready: true });
  if (!list.length) return;
  const token = ++ab.loadToken;
  const wasPlaying = ab.playing;
  stopAb();
  ab.note = "";
  const first = renderById(list[0].renderId);
  const rate = (first && first.result && first.result.samplerate) || 48000;
  const total = Math.max(...list.map((s) => {
    const r = renderById(s.renderId);
    return r && r.result ? r.result.frames / r.result.samplerate : 0;
  }));
  let start = Math.max(0, around - WINDOW_LEAD_S);
  if (ab.loop.on && ab.loop.in !== null) start = Math.max(0, Math.min(start, ab.loop.in - 1));
  if (total && start > total - 1) start = Math.max(0, total - WINDOW_S);
  ui.abStatus.textContent = "loading the window…";
  const ctx = await ensureContext(rate);
  let loaded;
  try {
    loaded = await Promise.all(list.map(async (s) => {
      const [win, loud] = await Promise.all([
        fetchWindow(s.renderId, start, WINDOW_S),
        renderLoudness(s.renderId).catch(() => ({ lufs: null })),
      ]);
      const buffer = await ctx.decodeAudioData(win.data);
      return { ...s, buffer, lufs: loud.lufs, start: win.start };
    }));
  } catch (err) {
    if (token !== ab.loadToken) return;
    ui.abStatus.textContent = `cannot load: ${err.message}`;
    bus.emit("notify", { message: `The A/B window could not be loaded: ${err.message}`, kind: "error" });
    return;
  }
  if (token !== ab.loadToken) return;
  ab.windowStart = loaded[0].start;
  ab.rate = ctx.sampleRate;
  ab.windowFrames = Math.max(...loaded.map((s) => s.buffer.length));
  ab.duration = total || ab.windowStart + ab.windowFrames / ab.rate;
  const known = loaded.map((s) => s.lufs).filter((x) => Number.isFinite(x));
  const quietest = known.length ? Math.min(...known) : null;
  for (const s of ab.sources) s.gainNode && s.gainNode.disconnect();
  ab.sources = loaded.map((s) => {
    const gainNode = ctx.createGain();
    gainNode.connect(ab.master);
    const match = quietest !== null && Number.isFinite(s.lufs) ? 10 ** ((quietest - s.lufs) / 20) : 1;
    return { ...s, gainNode, match, node: null, startTime: 0, startFrame: 0 };
  });
  if (ab.active >= ab.sources.length) ab.active = 0;
  ab.anchorPos = Math.min(Math.max(around, ab.windowStart), ab.windowStart + ab.windowFrames / ab.rate);
  ui.abStatus.textContent = ab.note || "";
  mode = "ab";
  ui.seek.max = String(ab.duration);
  drawSwitcher();
  drawState();
  if (wasPlaying) startAb(ab.anchorPos);
}

function inWindow(pos) {
  return pos >= ab.windowStart && pos < ab.windowStart + ab.windowFrames / ab.rate - 0.05;
}

function startAb(pos) {
  if (!ab.sources.length) return;
  stopStream();
  const ctx = ab.ctx;
  if (ctx.state === "suspended") ctx.resume();
  stopNodes();
  const when = ctx.currentTime + 0.06;
  const offset = Math.max(0, pos - ab.windowStart);
  const loopOn = ab.loop.on && ab.loop.in !== null && ab.loop.out !== null &&
    inWindow(ab.loop.in) && ab.loop.out <= ab.windowStart + ab.windowFrames / ab.rate;
  ab.sources.forEach((s, i) => {
    const node = ctx.createBufferSource();
    node.buffer = s.buffer;
    if (loopOn) {
      node.loop = true;
      node.loopStart = ab.loop.in - ab.windowStart;
      node.loopEnd = ab.loop.out - ab.windowStart;
    }
    node.connect(s.gainNode);
    s.gainNode.gain.cancelScheduledValues(0);
    s.gainNode.gain.setValueAtTime(i === ab.active ? s.match : 0, 0);
    node.start(when, Math.min(offset, s.buffer.duration));
    s.node = node;
    s.startTime = when;
    s.startFrame = Math.round(offset * ab.rate);
    s.looping = loopOn;
  });
  ab.anchorTime = when;
  ab.anchorPos = pos;
  ab.playing = true;
  mode = "ab";
  tick();
  drawState();
}

function stopNodes() {
  for (const s of ab.sources) {
    if (s.node) {
      try { s.node.stop(); } catch { /* not started */ }
      s.node.disconnect();
      s.node = null;
    }
  }
}

function stopAb() {
  if (ab.playing) ab.anchorPos = position();
  stopNodes();
  ab.playing = false;
}

/** Frames into the window played by source s now (its own start time and offset). */
function sourceFrame(s) {
  if (!s.node) return Math.round((ab.anchorPos - ab.windowStart) * ab.rate);
  const elapsed = Math.max(0, ab.ctx.currentTime - s.startTime);
  let frame = s.startFrame + Math.round(elapsed * ab.rate);
  if (s.looping) {
    const a = Math.round(s.node.loopStart * ab.rate);
    const b = Math.round(s.node.loopEnd * ab.rate);
    if (frame >= b && b > a) frame = a + ((frame - a) % (b - a));
  }
  return Math.min(frame, s.buffer.length);
}

function position() {
  if (mode === "stream") return ui.audio.currentTime || 0;
  if (!ab.sources.length) return ab.anchorPos;
  const s = ab.sources[ab.active] || ab.sources[0];
  return ab.windowStart + sourceFrame(s) / ab.rate;
}

function pick(index) {
  if (index < 0 || index >= ab.sources.length) return;
  if (mode === "stream") {
    // Back from the row player to the switcher.
    stopStream();
    mode = "ab";
    drawState();
  }
  ab.active = index;
  if (ab.ctx) {
    const t = ab.ctx.currentTime;
    ab.sources.forEach((s, i) => {
      const g = s.gainNode.gain;
      g.cancelScheduledValues(t);
      g.setValueAtTime(g.value, t);
      g.linearRampToValueAtTime(i === index ? s.match : 0, t + RAMP_S);
    });
  }
  drawSwitcher();
}

function seekTo(pos) {
  pos = Math.max(0, Math.min(pos, ab.duration || pos));
  if (mode === "stream") {
    ui.audio.currentTime = pos;
    return;
  }
  if (!ab.sources.length) return;
  if (!inWindow(pos)) {
    ab.anchorPos = pos;
    loadWindow(pos);
    return;
  }
  if (ab.playing) startAb(pos);
  else {
    ab.anchorPos = pos;
    drawState();
  }
}

function togglePlay() {
  if (mode === "stream") {
    if (ui.audio.paused) ui.audio.play().catch(() => {});
    else ui.audio.pause();
    return;
  }
  if (!ab.sources.length) return;
  if (ab.playing) {
    stopAb();
    drawState();
  } else startAb(inWindow(ab.anchorPos) ? ab.anchorPos : ab.windowStart);
}

function setLoopPoint(which) {
  const pos = position();
  ab.loop[which] = pos;
  if (ab.loop.in !== null && ab.loop.out !== null && ab.loop.out <= ab.loop.in) {
    if (which === "in") ab.loop.out = null;
    else ab.loop.in = null;
  }
  drawLoop();
}

function toggleLoop() {
  if (ab.loop.in === null || ab.loop.out === null) {
    bus.emit("notify", { message: "Set the loop's in and out first (I and O).", kind: "info" });
    return;
  }
  ab.loop.on = !ab.loop.on;
  drawLoop();
  if (mode === "ab" && ab.sources.length) {
    const pos = ab.loop.on ? ab.loop.in : position();
    if (ab.loop.on && (!inWindow(ab.loop.in) || ab.loop.out > ab.windowStart + ab.windowFrames / ab.rate)) loadWindow(pos);
    else if (ab.playing) startAb(pos);
  }
}

async function addReference() {
  const first = ab.ids.map(renderById).find(Boolean);
  if (!first) {
    bus.emit("notify", { message: "Add a render to A/B first: the reference follows its layout and loudness.", kind: "info" });
    return;
  }
  const req = first.request;
  if (isAdmRequest(req)) {
    // The renderer has no stereo fold-down of an ADM master in this version.
    bus.emit("notify", { message: "An ADM master has no stereo fold-down yet: compare it with another render of it (another HRTF set or programme).", kind: "info" });
    return;
  }
  if (/^(foa|hoa\d)$/.test(String(req.layout ?? ""))) {
    // A scene has no loudspeaker channels to fold down: its reference is another render
    // of it (another decoder or order), added to the A/B as any render is.
    bus.emit("notify", { message: "An Ambisonic scene has no stereo fold-down: compare it with another render of the scene (another decoder or order).", kind: "info" });
    return;
  }
  const same = (a, b) => JSON.stringify(a ?? null) === JSON.stringify(b ?? null);
  const existing = rendersOf(req.stem_id).find((r) => r.request.fold === "stereo" && !r.request.solo &&
    same(r.request.layout, req.layout) && same(r.request.channel_order, req.channel_order) &&
    same(r.request.loudness, req.loudness) && !["failed", "cancelled"].includes(r.state));
  let ref = existing;
  if (!ref) {
    try {
      ref = await postRender({ ...req, fold: "stereo", solo: null });
    } catch (err) {
      bus.emit("notify", { message: `The reference fold-down was refused: ${err.message}`, kind: "error" });
      return;
    }
  }
  ab.referenceId = ref.id;
  drawSwitcher();
  if (ref.state === "done") loadWindow(position());
  else ui.abStatus.textContent = "making the reference (stereo fold-down)…";
}

// ---------- drawing ----------

function drawSwitcher() {
  const list = sourceList();
  const buttons = list.map((s, i) => {
    const r = renderById(s.renderId);
    const loaded = ab.sources.find((x) => x.key === s.key);
    const pressed = loaded && ab.sources.indexOf(loaded) === ab.active;
    const title = r ? describeRequest(r.request) : s.renderId;
    const ready = r && r.state === "done";
    return el("button", { type: "button", class: `btn btn-small ab-source${s.key === "reference" ? " ab-reference" : ""}`,
      "data-key": s.key, "aria-pressed": pressed ? "true" : "false", disabled: !loaded,
      title: `${i + 1}: ${title}${loaded && loaded.lufs !== null ? ` · ${fmtDb(loaded.lufs)} LUFS, matched ${fmtDb(20 * Math.log10(loaded.match))} dB` : ""}`,
      onclick: () => pick(ab.sources.indexOf(loaded)) },
    el("span", { class: "key", text: String(i + 1) }), ` ${s.label}`, ready ? "" : " (rendering)");
  });
  ui.switcher.replaceChildren(...buttons);
  ui.switcherEmpty.hidden = list.length > 0;
  ui.refButton.disabled = ab.ids.length === 0;
  ui.blindButton.disabled = ab.ids.length < 2;
  ui.refButton.setAttribute("aria-pressed", ab.referenceId ? "true" : "false");
}

function drawLoop() {
  const t = (x) => (x === null ? "—" : fmtClock(x));
  ui.loopText.textContent = `${t(ab.loop.in)} – ${t(ab.loop.out)}`;
  ui.loopButton.setAttribute("aria-pressed", ab.loop.on ? "true" : "false");
}

function drawState() {
  const playing = mode === "stream" ? !ui.audio.paused : ab.playing;
  ui.play.textContent = playing ? "❚❚ Pause" : "▶ Play";
  ui.play.setAttribute("aria-label", playing ? "Pause" : "Play");
  ui.streamBox.hidden = mode !== "stream";
  ui.abBox.dataset.active = mode === "ab" ? "1" : "0";
  const pos = position();
  const total = mode === "stream" ? ui.audio.duration || 0 : ab.duration;
  ui.seek.max = String(total || 1);
  if (document.activeElement !== ui.seek) ui.seek.value = String(pos);
  ui.clock.textContent = `${fmtClock(pos)} / ${fmtClock(total)}`;
}

let ticking = false;
function tick() {
  if (ticking) return;
  ticking = true;
  const step = () => {
    drawState();
    if (mode === "ab" && ab.playing) {
      const pos = position();
      const end = ab.windowStart + ab.windowFrames / ab.rate;
      if (!ab.loop.on && pos >= end - 0.02) {
        if (end < ab.duration - 0.05) loadWindow(end);
        else { stopAb(); ab.anchorPos = ab.windowStart; drawState(); }
      }
    }
    if ((mode === "ab" && ab.playing) || (mode === "stream" && !ui.audio.paused)) requestAnimationFrame(step);
    else ticking = false;
  };
  requestAnimationFrame(step);
}

// ---------- keys ----------

function typing(target) {
  return target && (target.isContentEditable || /^(INPUT|SELECT|TEXTAREA)$/.test(target.tagName)) &&
    !(target.type === "range");
}

function onKey(event) {
  if (event.defaultPrevented || event.ctrlKey || event.metaKey || event.altKey || typing(event.target)) return;
  if (document.querySelector("dialog[open]")) return;
  const key = event.key;
  let handled = true;
  if (key === " ") {
    // Space is play/pause everywhere but in text fields (Enter still presses a button).
    spaceDown = true;
    togglePlay();
  } else if (/^[1-9]$/.test(key)) pick(Number(key) - 1);
  else if (key === "s" || key === "S") pick((ab.active + 1) % Math.max(1, ab.sources.length));
  else if (key === "l" || key === "L") toggleLoop();
  else if (key === "i" || key === "I") setLoopPoint("in");
  else if (key === "o" || key === "O") setLoopPoint("out");
  else if (key === "ArrowRight" || key === "ArrowLeft") {
    if (event.target.closest && event.target.closest("[role=tab], .tabs")) return;
    const step = (event.shiftKey ? 1 : 5) * (key === "ArrowRight" ? 1 : -1);
    seekTo(position() + step);
  } else handled = false;
  if (handled) event.preventDefault();
}

let spaceDown = false;
function onKeyUp(event) {
  // A button with focus would otherwise be pressed by the Space that started playback.
  if (event.key === " " && spaceDown) {
    spaceDown = false;
    event.preventDefault();
  }
}

// ---------- mount ----------

export async function mountListen(root) {
  ui.audio = el("audio", { id: "stream-audio", preload: "auto" });
  ui.play = el("button", { type: "button", class: "btn btn-primary", id: "player-play", onclick: togglePlay }, "▶ Play");
  ui.seek = el("input", { type: "range", id: "player-seek", min: 0, max: 1, step: 0.01, value: 0, "aria-label": "Position" });
  ui.seek.addEventListener("input", () => { ui.clock.textContent = `${fmtClock(Number(ui.seek.value))}`; });
  ui.seek.addEventListener("change", () => seekTo(Number(ui.seek.value)));
  ui.clock = el("span", { class: "mono player-clock", id: "player-clock" }, "0:00.0 / 0:00.0");
  ui.nowPlaying = el("span", { class: "player-now" });
  ui.streamNote = el("span", { class: "hint", hidden: true });
  ui.streamBox = el("span", { class: "stream-box", hidden: true }, ui.nowPlaying, ui.streamNote);
  ui.switcher = el("span", { class: "ab-switcher", id: "ab-switcher", role: "group", "aria-label": "A/B sources" });
  ui.switcherEmpty = el("span", { class: "hint", text: "A/B: add renders with their A/B button" });
  ui.refButton = el("button", { type: "button", class: "btn btn-small", id: "ab-reference", disabled: true,
    title: "Add the stem's plain stereo fold-down (ITU-R BS.775), level-matched", onclick: addReference }, "+ reference");
  ui.abStatus = el("span", { class: "hint", id: "ab-status", "aria-live": "polite" });
  ui.blindButton = el("button", { type: "button", class: "btn btn-small btn-quiet", id: "ab-blind", disabled: true,
    title: "Start a blind test of the renders in the switcher (Blind tests tab)",
    onclick: () => bus.emit("compare-renders", { renderIds: [...ab.ids] }) }, "Blind test…");
  ui.loopText = el("span", { class: "mono hint", id: "loop-text" });
  ui.loopButton = el("button", { type: "button", class: "btn btn-small", id: "loop-toggle", "aria-pressed": "false", onclick: toggleLoop }, "Loop");
  const loopIn = el("button", { type: "button", class: "btn btn-small btn-quiet", onclick: () => setLoopPoint("in") }, "In");
  const loopOut = el("button", { type: "button", class: "btn btn-small btn-quiet", onclick: () => setLoopPoint("out") }, "Out");
  ui.volume = el("input", { type: "range", id: "player-volume", min: -60, max: 0, step: 1, value: START_DB, "aria-label": "Volume (dB)" });
  ui.volume.addEventListener("input", () => setMaster(Number(ui.volume.value)));
  ui.volumeText = el("span", { class: "mono", id: "player-volume-text" });
  const help = el("div", { class: "player-help panel", id: "player-help", hidden: true, role: "note" },
    el("strong", { text: "Keys" }),
    el("ul", {},
      el("li", {}, el("kbd", {}, "Space"), " play / pause"),
      el("li", {}, el("kbd", {}, "1"), "–", el("kbd", {}, "9"), " pick a source"),
      el("li", {}, el("kbd", {}, "S"), " next source"),
      el("li", {}, el("kbd", {}, "I"), " / ", el("kbd", {}, "O"), " loop in / out, ", el("kbd", {}, "L"), " loop on/off"),
      el("li", {}, el("kbd", {}, "←"), " ", el("kbd", {}, "→"), " seek 5 s (Shift: 1 s)"),
      el("li", {}, el("kbd", {}, "["), " ", el("kbd", {}, "]"), " previous / next tab")));
  const helpButton = el("button", { type: "button", class: "btn btn-small btn-quiet", id: "player-keys", "aria-expanded": "false",
    "aria-controls": "player-help", onclick: () => {
      help.hidden = !help.hidden;
      helpButton.setAttribute("aria-expanded", help.hidden ? "false" : "true");
    } }, "Keys");
  ui.abBox = el("span", { class: "ab-box" }, ui.switcher, ui.switcherEmpty, ui.refButton, ui.blindButton, ui.abStatus);
  root.replaceChildren(
    el("div", { class: "player-row" }, ui.play, ui.streamBox, ui.abBox, el("span", { class: "spacer" }),
      el("span", { class: "loop-box" }, loopIn, loopOut, ui.loopButton, ui.loopText),
      helpButton),
    el("div", { class: "player-row" }, ui.clock, ui.seek,
      el("label", { class: "volume-box", for: "player-volume" }, "Level"), ui.volume, ui.volumeText,
      el("span", { class: "player-caution", role: "note", text: CAUTION_TEXT })),
    ui.audio, help);
  setMaster(START_DB);
  drawLoop();
  drawSwitcher();
  drawState();
  ui.audio.addEventListener("play", () => { tick(); drawState(); });
  ui.audio.addEventListener("pause", drawState);
  ui.audio.addEventListener("ended", drawState);
  ui.audio.addEventListener("loadedmetadata", drawState);
  document.addEventListener("keydown", onKey);
  document.addEventListener("keyup", onKeyUp, true);

  bus.on("play", ({ renderId }) => playStream(renderId));
  bus.on("ab-toggle", ({ renderId }) => toggleAb(renderId));
  bus.on("ab-remove", ({ renderId }) => {
    if (ab.referenceId === renderId) { ab.referenceId = null; drawSwitcher(); }
    if (ab.ids.includes(renderId)) setAbIds(ab.ids.filter((x) => x !== renderId));
  });
  bus.on("listen", ({ renderIds }) => setAbIds([...(renderIds || [])]));
  bus.on("stem-selected", ({ stem }) => {
    const first = ab.ids.map(renderById).find(Boolean);
    if (first && (!stem || first.request.stem_id !== stem.id)) {
      ab.referenceId = null;
      setAbIds([]);
    }
  });
  bus.on("renders-changed", ({ render }) => {
    if (render && render.id === ab.referenceId && render.state === "done") loadWindow(position());
    else if (render && render.id === ab.referenceId && FINAL_BAD.has(render.state)) {
      ab.referenceId = null;
      ui.abStatus.textContent = `the reference ${render.state}: ${render.message || ""}`;
      drawSwitcher();
    }
  });

  const player = {
    positions() {
      const out = {};
      for (const s of ab.sources) out[s.key] = Math.round(ab.windowStart * ab.rate) + sourceFrame(s);
      return out;
    },
    sources: () => ab.sources.map((s) => ({ key: s.key, renderId: s.renderId, label: s.label, lufs: s.lufs, match: s.match,
      gain: s.gainNode.gain.value, startTime: s.startTime, startFrame: s.startFrame, looping: Boolean(s.looping), length: s.buffer.length,
      loopStart: s.node ? s.node.loopStart : null, loopEnd: s.node ? s.node.loopEnd : null })),
    state: () => ({ mode, playing: mode === "stream" ? !ui.audio.paused : ab.playing, active: ab.active,
      masterDb, loop: { ...ab.loop }, windowStart: ab.windowStart, referenceId: ab.referenceId, position: position() }),
    pick,
    togglePlay,
  };
  window.earfoldDesk = window.earfoldDesk || {};
  window.earfoldDesk.player = player;
}

const FINAL_BAD = new Set(["failed", "cancelled"]);
