// The desk's "Speakers" tab: make a loudspeaker layout of one's own.
//
// Start from a built-in or saved layout, or from nothing; move loudspeakers on the top
// view (azimuth) or on the elevation view (azimuth and elevation), or type the angles and
// labels in the table. Angles follow the project's convention: azimuth counter-clockwise
// from the front, positive to the left; elevation up; degrees. Dragging snaps to 1
// degree, to 5 with Shift; arrow keys move a focused loudspeaker the same way.
//
// The layout is saved as a preset of kind "layout" (POST /v1/presets), whose check is the
// renderer's own (the same as a layout object in a render request); its answer is shown
// in words. Saved layouts appear in the settings' layout list, and "Use in settings"
// selects one there (event "layout-use").

import { bus } from "./bus.js";
import { el, num, sentence, stableJson, svg, uniqueId } from "./form-kit.js";
import { createPreset, deletePreset, loadPresets, presetById, presetsOf, presetsState, updatePreset } from "./presets.js";
import { ensureStyles } from "./settings.js";

const TOP = { size: 270, radius: 108 };
/** Zenith angle (90 - elevation) drawn at the top view's outer ring: -30 degrees of
    elevation, the lowest layer the common layouts use (BS.2051's bottom layer). */
const TOP_ZENITH_MAX = 120;
const SIDE = { width: 500, height: 300, left: 34, right: 12, top: 14, bottom: 24 };
const LABEL_FONT_PX = 11;

const E = {
  root: null,
  name: "",
  description: "",
  speakers: [],
  presetId: null,
  savedJson: null,
  selected: -1,
  drag: null,
  nodes: {},
};

// ------------------------------------------------------------------ geometry

function wrap(az) {
  let a = ((az + 180) % 360 + 360) % 360 - 180;
  if (a === -180) a = 180;
  return a;
}

function snap(value, step) {
  return Math.round(value / step) * step;
}

function topRadius(elevation) {
  const zenith = Math.min(TOP_ZENITH_MAX, 90 - elevation);
  return (TOP.radius * zenith) / TOP_ZENITH_MAX;
}

function topPoint(s) {
  const c = TOP.size / 2;
  const r = topRadius(s.elevation);
  const a = (s.azimuth * Math.PI) / 180;
  return { x: c - Math.sin(a) * r, y: c - Math.cos(a) * r };
}

function sidePlot() {
  return { w: SIDE.width - SIDE.left - SIDE.right, h: SIDE.height - SIDE.top - SIDE.bottom };
}

function sidePoint(s) {
  const { w, h } = sidePlot();
  return { x: SIDE.left + ((180 - wrap(s.azimuth)) / 360) * w, y: SIDE.top + ((90 - s.elevation) / 180) * h };
}

function svgPoint(picture, event) {
  const pt = picture.createSVGPoint();
  pt.x = event.clientX;
  pt.y = event.clientY;
  return pt.matrixTransform(picture.getScreenCTM().inverse());
}

// ------------------------------------------------------------------ label placement

function labelBox(label, x, y) {
  const w = label.length * LABEL_FONT_PX * 0.7 + 4;
  const h = LABEL_FONT_PX + 4;
  return { x: x - w / 2, y: y - h / 2, w, h };
}

/**
 * Place labels near their loudspeakers without overlapping each other or the marks:
 * start at the preferred offset, then push overlapping boxes apart a few dozen times.
 * `obstacles` are boxes ({x, y, w, h}) that labels must keep clear of (the view's words).
 * `items` = [{ label, ax, ay, px, py }] (anchor = the mark, p = preferred centre).
 */
export function placeLabels(items, bounds, markRadius = 7, obstacles = []) {
  const boxes = items.map((it) => ({ ...labelBox(it.label, it.px, it.py), it }));
  const marks = [
    ...items.map((it) => ({ x: it.ax - markRadius, y: it.ay - markRadius, w: 2 * markRadius, h: 2 * markRadius })),
    ...obstacles,
  ];
  const overlap = (a, b) => {
    const dx = Math.min(a.x + a.w, b.x + b.w) - Math.max(a.x, b.x);
    const dy = Math.min(a.y + a.h, b.y + b.h) - Math.max(a.y, b.y);
    return dx > 0 && dy > 0 ? { dx, dy } : null;
  };
  const push = (a, b, o, share) => {
    const acx = a.x + a.w / 2; const acy = a.y + a.h / 2;
    const bcx = b.x + b.w / 2; const bcy = b.y + b.h / 2;
    if (o.dx < o.dy) {
      const dir = acx < bcx || (acx === bcx && a.it.label < (b.it ? b.it.label : "")) ? -1 : 1;
      a.x += dir * o.dx * share + dir * 0.5;
    } else {
      const dir = acy < bcy || (acy === bcy && a.it.label < (b.it ? b.it.label : "")) ? -1 : 1;
      a.y += dir * o.dy * share + dir * 0.5;
    }
  };
  for (let round = 0; round < 300; round += 1) {
    let moved = false;
    for (let i = 0; i < boxes.length; i += 1) {
      for (let j = i + 1; j < boxes.length; j += 1) {
        const o = overlap(boxes[i], boxes[j]);
        if (o) { push(boxes[i], boxes[j], o, 0.5); push(boxes[j], boxes[i], o, 0.5); moved = true; }
      }
      for (let m = 0; m < marks.length; m += 1) {
        const o = overlap(boxes[i], marks[m]);
        if (o) { push(boxes[i], marks[m], o, 1); moved = true; }
      }
      const b = boxes[i];
      b.x = Math.max(bounds.x, Math.min(bounds.x + bounds.w - b.w, b.x));
      b.y = Math.max(bounds.y, Math.min(bounds.y + bounds.h - b.h, b.y));
    }
    if (!moved) break;
  }
  return boxes.map((b) => ({ x: b.x + b.w / 2, y: b.y + b.h / 2, w: b.w, h: b.h }));
}

// ------------------------------------------------------------------ drawing

/** A word of a view's furniture, and the box labels keep clear of. */
function word(cls, x, y, text, anchor, obstacles) {
  const w = text.length * 10 * 0.68 + 2;
  const left = anchor === "middle" ? x - w / 2 : anchor === "end" ? x - w : x;
  obstacles.push({ x: left, y: y - 10, w, h: 12 });
  return svg("text", { class: cls, x, y, "text-anchor": anchor || "start" }, text);
}

function drawTop() {
  const picture = E.nodes.top;
  const c = TOP.size / 2;
  picture.replaceChildren();
  picture.append(svg("title", {}, "Top view: front up, left to the left; rings by elevation"));
  const obstacles = [];
  for (const elevation of [-30, 0, 30, 60]) {
    const r = topRadius(elevation);
    picture.append(svg("circle", { class: elevation === 0 ? "ring ring-ear" : "ring", cx: c, cy: c, r }));
  }
  // Ring names in a column at the lower right, outside the rings where no label goes.
  picture.append(word("ring-label", TOP.size - 4, TOP.size - 40, "rings, out to in:", "end", obstacles));
  ["elevation -30°", "0° (solid)", "30°", "60°"].forEach((text, k) => {
    picture.append(word("ring-label", TOP.size - 4, TOP.size - 30 + 9 * k, text, "end", obstacles));
  });
  picture.append(
    svg("line", { class: "axis", x1: c, y1: c - TOP.radius - 4, x2: c, y2: c + TOP.radius + 4 }),
    svg("line", { class: "axis", x1: c - TOP.radius - 4, y1: c, x2: c + TOP.radius + 4, y2: c }),
    word("view-word", c + 6, 10, "front", "start", obstacles),
    word("view-word", 4, c - 6, "left", "start", obstacles),
    word("view-word", TOP.size - 4, c - 6, "right", "end", obstacles),
    svg("circle", { class: "head", cx: c, cy: c, r: 9 }),
    svg("path", { class: "head", d: `M ${c - 4} ${c - 8} L ${c} ${c - 14} L ${c + 4} ${c - 8}` }),
  );
  const mains = E.speakers.map((s, i) => ({ s, i })).filter(({ s }) => !s.lfe);
  const items = mains.map(({ s }) => {
    const p = topPoint(s);
    const dx = p.x - c; const dy = p.y - c;
    const d = Math.hypot(dx, dy) || 1;
    const off = 15;
    return { label: s.label, ax: p.x, ay: p.y, px: p.x + (dx / d) * off * (d > 2 ? 1 : 0), py: p.y + (d > 2 ? (dy / d) * off : off) };
  });
  obstacles.push({ x: c - 10, y: c - 15, w: 20, h: 25 });
  const placed = placeLabels(items, { x: 0, y: 0, w: TOP.size, h: TOP.size }, 7, obstacles);
  mains.forEach(({ s, i }, k) => picture.append(speakerMark(s, i, items[k], placed[k], "top")));
  const lfe = E.speakers.map((s, i) => ({ s, i })).filter(({ s }) => s.lfe);
  if (lfe.length) {
    const box = svg("g", { class: "lfe-box" });
    box.append(svg("rect", { x: 2, y: TOP.size - 20 - 16 * lfe.length, width: 74, height: 18 + 16 * lfe.length, rx: 4 }),
      svg("text", { class: "view-word", x: 8, y: TOP.size - 8 - 16 * lfe.length }, "LFE (any place)"));
    lfe.forEach(({ s, i }, k) => {
      const y = TOP.size - 12 - 16 * (lfe.length - 1 - k);
      const g = svg("g", { class: `spk lfe${i === E.selected ? " selected" : ""}`, "data-label": s.label, "data-index": i, tabindex: 0 },
        svg("rect", { x: 10, y: y - 6, width: 12, height: 12, rx: 2 }),
        svg("text", { class: "spk-label", x: 28, y: y + 4 }, s.label));
      g.addEventListener("click", () => select(i));
      box.append(g);
    });
    picture.append(box);
  }
}

function drawSide() {
  const picture = E.nodes.side;
  const { w, h } = sidePlot();
  picture.replaceChildren();
  picture.append(svg("title", {}, "Elevation view: all around the listener unrolled, left half = your left; up = above"));
  for (let az = 180; az >= -180; az -= 45) {
    const x = SIDE.left + ((180 - az) / 360) * w;
    picture.append(svg("line", { class: az === 0 ? "axis" : "grid", x1: x, y1: SIDE.top, x2: x, y2: SIDE.top + h }),
      svg("text", { class: "ring-label", x, y: SIDE.height - 8, "text-anchor": "middle" }, `${az}°`));
  }
  for (let elv = 90; elv >= -90; elv -= 30) {
    const y = SIDE.top + ((90 - elv) / 180) * h;
    picture.append(svg("line", { class: elv === 0 ? "axis" : "grid", x1: SIDE.left, y1: y, x2: SIDE.left + w, y2: y }),
      svg("text", { class: "ring-label", x: SIDE.left - 4, y: y + 4, "text-anchor": "end" }, `${elv}°`));
  }
  const obstacles = [];
  picture.append(
    word("view-word", SIDE.left + w / 2 + 4, SIDE.top + h - 4, "front", "start", obstacles),
    word("view-word", SIDE.left + w * 0.25, SIDE.top + h - 4, "left", "middle", obstacles),
    word("view-word", SIDE.left + w * 0.75, SIDE.top + h - 4, "right", "middle", obstacles),
  );
  const mains = E.speakers.map((s, i) => ({ s, i })).filter(({ s }) => !s.lfe);
  // Labels sit below their marks; where a row is too crowded for that, neighbours take
  // turns above and below.
  const above = new Set();
  const rows = new Map();
  for (const { s, i } of mains) {
    const key = Math.round(s.elevation);
    if (!rows.has(key)) rows.set(key, []);
    rows.get(key).push({ i, x: sidePoint(s).x, w: labelBox(s.label, 0, 0).w });
  }
  for (const row of rows.values()) {
    row.sort((a, b) => a.x - b.x);
    row.forEach((m, k) => {
      const prev = row[k - 1];
      if (prev && !above.has(prev.i) && m.x - prev.x < (m.w + prev.w) / 2 + 2) above.add(m.i);
    });
  }
  const items = mains.map(({ s, i }) => {
    const p = sidePoint(s);
    return { label: s.label, ax: p.x, ay: p.y, px: p.x, py: p.y + (above.has(i) ? -15 : 15) };
  });
  const placed = placeLabels(items, { x: SIDE.left, y: 0, w, h: SIDE.height - 14 }, 7, obstacles);
  mains.forEach(({ s, i }, k) => picture.append(speakerMark(s, i, items[k], placed[k], "side")));
}

function speakerMark(s, i, item, place, view) {
  const g = svg("g", {
    class: `spk${i === E.selected ? " selected" : ""}`, "data-label": s.label, "data-index": i, tabindex: 0,
    role: "button", "aria-label": `${s.label}: azimuth ${num(s.azimuth, 1)}, elevation ${num(s.elevation, 1)} degrees`,
  });
  const far = Math.hypot(place.x - item.ax, place.y - item.ay) > 16;
  if (far) g.append(svg("line", { class: "leader", x1: item.ax, y1: item.ay, x2: place.x, y2: place.y }));
  g.append(svg("circle", { class: "mark", cx: item.ax, cy: item.ay, r: 6 }),
    svg("text", { class: "spk-label", x: place.x, y: place.y + 4, "text-anchor": "middle" }, s.label));
  g.addEventListener("pointerdown", (event) => startDrag(event, i, view));
  g.addEventListener("keydown", (event) => nudge(event, i, view));
  g.addEventListener("focus", () => { if (E.selected !== i) { E.selected = i; markSelected(); } });
  return g;
}

function markSelected() {
  for (const g of E.root.querySelectorAll(".spk")) g.classList.toggle("selected", Number(g.dataset.index) === E.selected);
  for (const row of E.nodes.tbody.rows) row.classList.toggle("selected", Number(row.dataset.index) === E.selected);
}

function redraw() {
  drawTop();
  drawSide();
  markSelected();
  summarise();
}

// ------------------------------------------------------------------ moving

function angleFrom(view, point, step) {
  if (view === "top") {
    const c = TOP.size / 2;
    return { azimuth: wrap(snap((Math.atan2(-(point.x - c), -(point.y - c)) * 180) / Math.PI, step)) };
  }
  const { w, h } = sidePlot();
  const az = 180 - ((point.x - SIDE.left) / w) * 360;
  const elv = 90 - ((point.y - SIDE.top) / h) * 180;
  return { azimuth: wrap(snap(Math.max(-180, Math.min(180, az)), step)), elevation: Math.max(-90, Math.min(90, snap(elv, step))) };
}

function startDrag(event, i, view) {
  if (event.button !== 0) return;
  event.preventDefault();
  const picture = view === "top" ? E.nodes.top : E.nodes.side;
  E.drag = { i, view, picture, id: event.pointerId };
  picture.setPointerCapture(event.pointerId);
  select(i, { scroll: false });
}

function onMove(event) {
  if (!E.drag || event.pointerId !== E.drag.id) return;
  const point = svgPoint(E.drag.picture, event);
  const change = angleFrom(E.drag.view, point, event.shiftKey ? 5 : 1);
  const s = E.speakers[E.drag.i];
  if (change.azimuth === s.azimuth && (change.elevation === undefined || change.elevation === s.elevation)) return;
  Object.assign(s, change);
  redraw();
  updateRow(E.drag.i);
}

function endDrag(event) {
  if (!E.drag || event.pointerId !== E.drag.id) return;
  E.drag = null;
  checkAll();
  const g = E.root.querySelector(`.spk[data-index="${E.selected}"]`);
  if (g) g.focus({ preventScroll: true });
}

function nudge(event, i, view) {
  const step = event.shiftKey ? 5 : 1;
  const s = E.speakers[i];
  const moves = {
    ArrowLeft: () => { s.azimuth = wrap(s.azimuth + step); },
    ArrowRight: () => { s.azimuth = wrap(s.azimuth - step); },
    ArrowUp: () => { if (view === "side") s.elevation = Math.min(90, s.elevation + step); else s.azimuth = wrap(s.azimuth + (s.azimuth >= 0 ? -step : step)); },
    ArrowDown: () => { if (view === "side") s.elevation = Math.max(-90, s.elevation - step); else s.azimuth = wrap(s.azimuth + (s.azimuth >= 0 ? step : -step)); },
    Delete: () => { removeSpeaker(i); },
  };
  if (!moves[event.key]) return;
  event.preventDefault();
  moves[event.key]();
  redraw();
  if (event.key === "Delete") return;
  updateRow(i);
  checkAll();
  const g = (view === "top" ? E.nodes.top : E.nodes.side).querySelector(`.spk[data-index="${i}"]`);
  if (g) g.focus({ preventScroll: true });
}

function addAt(event, view) {
  if (event.target.closest(".spk")) return;
  const point = svgPoint(view === "top" ? E.nodes.top : E.nodes.side, event);
  const change = angleFrom(view, point, event.shiftKey ? 5 : 1);
  addSpeaker({ azimuth: change.azimuth, elevation: change.elevation ?? 0 });
}

// ------------------------------------------------------------------ the table

function freeLabel() {
  const used = new Set(E.speakers.map((s) => s.label.toLowerCase()));
  for (let n = 1; ; n += 1) if (!used.has(`s${n}`)) return `S${n}`;
}

function addSpeaker(partial = {}) {
  E.speakers.push({ label: freeLabel(), azimuth: 0, elevation: 0, lfe: false, ...partial });
  E.selected = E.speakers.length - 1;
  drawTable();
  redraw();
  checkAll();
  const row = E.nodes.tbody.rows[E.selected];
  if (row) row.querySelector("input").focus();
}

function removeSpeaker(i) {
  E.speakers.splice(i, 1);
  E.selected = Math.min(E.selected, E.speakers.length - 1);
  drawTable();
  redraw();
  checkAll();
}

function select(i, { scroll = true } = {}) {
  E.selected = i;
  markSelected();
  const row = E.nodes.tbody.rows[i];
  if (row && scroll) row.scrollIntoView({ block: "nearest" });
}

function drawTable() {
  const body = E.nodes.tbody;
  body.replaceChildren();
  E.speakers.forEach((s, i) => {
    const label = el("input", { type: "text", value: s.label, "aria-label": `label of loudspeaker ${i + 1}`, "data-col": "label", size: 6 });
    const az = el("input", { type: "number", step: "1", value: s.azimuth, "aria-label": `azimuth of ${s.label}`, "data-col": "azimuth" });
    const elv = el("input", { type: "number", step: "1", min: "-90", max: "90", value: s.elevation, "aria-label": `elevation of ${s.label}`, "data-col": "elevation" });
    const lfe = el("input", { type: "checkbox", "aria-label": `${s.label} is an LFE channel`, "data-col": "lfe" });
    lfe.checked = Boolean(s.lfe);
    const remove = el("button", { type: "button", class: "btn btn-quiet btn-small", "aria-label": `remove ${s.label}`, title: "remove" }, "×");
    const problem = el("td", { class: "row-problem", colspan: 5, hidden: true });
    const row = el("tr", { "data-index": i }, el("td", {}, label), el("td", {}, az), el("td", {}, elv), el("td", { class: "center" }, lfe), el("td", {}, remove));
    row.addEventListener("focusin", () => select(i, { scroll: false }));
    const typed = () => {
      s.label = label.value;
      const a = Number(az.value);
      const e = Number(elv.value);
      if (az.value.trim() !== "" && Number.isFinite(a)) s.azimuth = a;
      if (elv.value.trim() !== "" && Number.isFinite(e)) s.elevation = e;
      s.lfe = lfe.checked;
      redraw();
      checkAll();
    };
    for (const input of [label, az, elv]) input.addEventListener("input", typed);
    lfe.addEventListener("change", typed);
    remove.addEventListener("click", () => removeSpeaker(i));
    body.append(row, el("tr", { class: "problem-row", "data-problem-for": i }, problem));
  });
  E.nodes.empty.hidden = E.speakers.length > 0;
}

function updateRow(i) {
  const row = E.nodes.tbody.querySelector(`tr[data-index="${i}"]`);
  if (!row) return;
  row.querySelector("[data-col='azimuth']").value = E.speakers[i].azimuth;
  row.querySelector("[data-col='elevation']").value = E.speakers[i].elevation;
}

// ------------------------------------------------------------------ checks

/** Problems per row and overall, checked as the renderer does where the page can know. */
function problems() {
  const rows = E.speakers.map(() => []);
  const overall = [];
  if (!E.name.trim()) overall.push("Give the layout a name.");
  if (!E.speakers.length) overall.push("Add at least one loudspeaker.");
  const seen = new Map();
  E.speakers.forEach((s, i) => {
    const label = s.label;
    if (!label) rows[i].push("needs a label");
    else if (label !== label.trim()) rows[i].push("label has spaces around it");
    else if (label.includes(",")) rows[i].push("label must not hold a comma");
    else if ([...label].some((ch) => ch < " ")) rows[i].push("label has a control character");
    const key = label.trim().toLowerCase();
    if (key && seen.has(key)) rows[i].push(`same label as loudspeaker ${seen.get(key) + 1}`);
    else if (key) seen.set(key, i);
    if (!Number.isFinite(s.azimuth) || Math.abs(s.azimuth) > 360) rows[i].push("azimuth must be within -360 to 360°");
    if (!Number.isFinite(s.elevation) || Math.abs(s.elevation) > 90) rows[i].push("elevation must be within -90 to 90°");
  });
  return { rows, overall };
}

function checkAll() {
  const { rows, overall } = problems();
  rows.forEach((list, i) => {
    const cell = E.nodes.tbody.querySelector(`tr[data-problem-for="${i}"] td`);
    const row = E.nodes.tbody.querySelector(`tr[data-index="${i}"]`);
    if (!cell) return;
    cell.textContent = list.length ? sentence(`${E.speakers[i].label || `loudspeaker ${i + 1}`}: ${list.join("; ")}`) : "";
    cell.hidden = !list.length;
    row.classList.toggle("has-problem", list.length > 0);
  });
  const bad = rows.filter((r) => r.length).length;
  E.nodes.problem.textContent = [...overall, bad ? `${bad} loudspeaker${bad > 1 ? "s need" : " needs"} a look.` : ""].filter(Boolean).join(" ");
  E.nodes.problem.hidden = !E.nodes.problem.textContent;
  E.nodes.problem.className = "warn";
  updateButtons();
  return !overall.length && !bad;
}

function body() {
  const out = {
    name: E.name.trim(),
    speakers: E.speakers.map((s) => ({ label: s.label, azimuth: wrap(s.azimuth), elevation: s.elevation, lfe: Boolean(s.lfe) })),
  };
  if (E.description.trim()) out.description = E.description.trim();
  return out;
}

function dirty() {
  return stableJson(body()) !== E.savedJson;
}

function summarise() {
  const mains = E.speakers.filter((s) => !s.lfe).length;
  const lfe = E.speakers.length - mains;
  const stem = bus.state.stem;
  const fit = stem ? (stem.channels === E.speakers.length ? ` · fits the selected ${stem.channels}-channel stem` : ` · the selected stem has ${stem.channels} channels`) : "";
  E.nodes.summary.textContent = `${mains} loudspeaker${mains === 1 ? "" : "s"}${lfe ? ` + ${lfe} LFE` : ""}${fit}`;
  updateButtons();
}

function updateButtons() {
  if (!E.nodes.save) return;
  const off = Boolean(presetsState.unavailable);
  E.nodes.save.disabled = off;
  E.nodes.update.hidden = !E.presetId;
  E.nodes.remove.hidden = !E.presetId;
  E.nodes.use.disabled = !E.presetId || dirty();
  E.nodes.state.textContent = off ? presetsState.unavailable
    : !E.presetId ? "Not saved yet." : dirty() ? "Changed since it was saved." : "Saved.";
}

// ------------------------------------------------------------------ start, save

function startFrom(value) {
  let source = null;
  if (value.startsWith("b:")) source = (bus.state.catalog.layouts || []).find((l) => l.name === value.slice(2));
  else if (value.startsWith("p:")) {
    const p = presetById(value.slice(2));
    if (p) source = { ...p.body, name: p.name };
  }
  E.presetId = value.startsWith("p:") && source ? value.slice(2) : null;
  E.name = source ? (value.startsWith("b:") ? `${source.name} (mine)` : source.name) : "";
  E.description = source && value.startsWith("p:") ? source.description || "" : "";
  E.speakers = source ? source.speakers.map((s) => ({ label: s.label, azimuth: s.azimuth, elevation: s.elevation, lfe: Boolean(s.lfe) })) : [];
  E.selected = -1;
  E.nodes.name.value = E.name;
  E.nodes.description.value = E.description;
  E.savedJson = E.presetId ? stableJson(body()) : null;
  drawTable();
  redraw();
  checkAll();
}

function presetNameMax() {
  const options = bus.state.catalog.options;
  return options && options.presets ? options.presets.name_max : null;
}

function fillStartList() {
  if (presetNameMax()) E.nodes.name.maxLength = presetNameMax();
  const select = E.nodes.start;
  const keep = select.value;
  select.replaceChildren(el("option", { value: "" }, "nothing (empty)"));
  // Loudspeaker layouts only: a scene (kind "scene") has no loudspeakers to move.
  const builtins = (bus.state.catalog.layouts || []).filter((l) => l.kind !== "scene");
  if (builtins.length) select.append(el("optgroup", { label: "Built-in" }, builtins.map((l) => el("option", { value: `b:${l.name}` }, `${l.name} · ${l.speakers.length} ch`))));
  const saved = presetsOf("layout");
  if (saved.length) select.append(el("optgroup", { label: "Saved" }, saved.map((p) => el("option", { value: `p:${p.id}` }, `${p.name} · ${p.body.speakers.length} ch`))));
  select.value = [...select.options].some((o) => o.value === keep) ? keep : "";
}

function say(text, kind) {
  E.nodes.message.textContent = text;
  E.nodes.message.className = kind;
  E.nodes.message.hidden = !text;
}

async function save(asNew) {
  if (!checkAll()) { say("The layout is not saved: see the marked rows.", "error"); return; }
  const b = body();
  const twin = presetsOf("layout").find((p) => p.name.toLowerCase() === b.name.toLowerCase() && (asNew || p.id !== E.presetId));
  if (twin) { say(`A saved layout is called “${twin.name}” already: give this one another name${asNew ? "" : ", or start from that one to change it"}.`, "error"); return; }
  try {
    const made = asNew || !E.presetId
      ? await createPreset(b.name, "layout", b)
      : await updatePreset(E.presetId, b.name, "layout", b);
    E.presetId = made.id;
    E.savedJson = stableJson(b);
    fillStartList();
    updateButtons();
    say(`Saved “${made.name}”: it is now in the settings' layout list.`, "ok");
    bus.emit("catalog-changed", { catalog: bus.state.catalog, source: "layout-presets" });
  } catch (err) {
    const detail = err.message || "the server refused the layout";
    const m = /speaker (\d+)/i.exec(detail);
    if (m) {
      const row = E.nodes.tbody.querySelector(`tr[data-problem-for="${Number(m[1]) - 1}"] td`);
      if (row) { row.textContent = sentence(detail); row.hidden = false; }
    }
    say(sentence(`Not saved: ${detail}`), "error");
  }
}

async function removePreset() {
  const p = presetById(E.presetId);
  if (!p) return;
  if (!E.nodes.remove.dataset.armed) {
    E.nodes.remove.dataset.armed = "1";
    E.nodes.remove.textContent = "Click again to delete";
    setTimeout(() => { delete E.nodes.remove.dataset.armed; E.nodes.remove.textContent = "Delete"; }, 4000);
    return;
  }
  try {
    await deletePreset(p.id);
    E.presetId = null;
    E.savedJson = null;
    fillStartList();
    updateButtons();
    say(`Deleted “${p.name}” (the loudspeakers stay here until you start again).`, "ok");
  } catch (err) {
    say(sentence(`Not deleted: ${err.message}`), "error");
  }
}

// ------------------------------------------------------------------ mount

export async function mountLayoutEditor(root) {
  ensureStyles();
  E.root = root;
  root.classList.add("layout-editor");
  const start = el("select", { id: uniqueId("lay-start"), "aria-label": "start from", "data-part": "start" });
  const startBtn = el("button", { type: "button", class: "btn btn-small", "data-action": "start" }, "Start");
  const name = el("input", { id: uniqueId("lay-name"), type: "text", "data-part": "name", placeholder: "e.g. studio B ring" });
  const description = el("input", { id: uniqueId("lay-desc"), type: "text", maxlength: "200", "data-part": "description", placeholder: "optional" });
  const top = svg("svg", { class: "view view-top", viewBox: `0 0 ${TOP.size} ${TOP.size}`, width: TOP.size, height: TOP.size, "data-view": "top", role: "group", "aria-label": "top view" });
  const side = svg("svg", { class: "view view-side", viewBox: `0 0 ${SIDE.width} ${SIDE.height}`, "data-view": "side", role: "group", "aria-label": "elevation view" });
  const tbody = el("tbody");
  const empty = el("p", { class: "hint" }, "No loudspeakers yet: add one with the button, or double-click a view.");
  const add = el("button", { type: "button", class: "btn btn-small", "data-action": "add" }, "Add a loudspeaker");
  const summary = el("span", { class: "hint", "data-part": "summary" });
  const problem = el("p", { class: "warn", hidden: true, "data-part": "problems" });
  const message = el("p", { hidden: true, role: "status", "data-part": "message" });
  const saveNew = el("button", { type: "button", class: "btn btn-primary", "data-action": "save" }, "Save as new");
  const update = el("button", { type: "button", class: "btn", "data-action": "update", hidden: true }, "Update");
  const remove = el("button", { type: "button", class: "btn btn-quiet", "data-action": "delete", hidden: true }, "Delete");
  const use = el("button", { type: "button", class: "btn", "data-action": "use" }, "Use in settings");
  const state = el("span", { class: "hint", "data-part": "state" });
  E.nodes = { start, name, description, top, side, tbody, empty, summary, problem, message, save: saveNew, update, remove, use, state };

  root.replaceChildren(
    el("div", { class: "toolbar" }, el("label", { for: start.id, class: "label" }, "Start from"), start, startBtn),
    el("div", { class: "row2" },
      el("div", { class: "field" }, el("label", { for: name.id }, "Name"), name),
      el("div", { class: "field" }, el("label", { for: description.id }, "Description"), description)),
    el("div", { class: "views" },
      el("figure", {}, top, el("figcaption", { class: "hint" }, "Top view: drag to turn (Shift: 5° steps); rings show elevation.")),
      el("div", { class: "table-box" },
        el("table", { class: "table compact speakers-table" },
          el("thead", {}, el("tr", {}, el("th", {}, "Label"), el("th", {}, "Az °"), el("th", {}, "El °"), el("th", {}, "LFE"), el("th", {}, el("span", { class: "visually-hidden" }, "remove")))),
          tbody),
        empty, el("div", { class: "toolbar" }, add, summary))),
    el("figure", { class: "side-figure" }, side, el("figcaption", { class: "hint" }, "Elevation view: the whole circle unrolled (left half = your left); drag to set azimuth and elevation; double-click to add.")),
    problem,
    el("div", { class: "toolbar" }, saveNew, update, remove, use, state),
    message);

  startBtn.addEventListener("click", () => startFrom(start.value));
  name.addEventListener("input", () => { E.name = name.value; checkAll(); });
  description.addEventListener("input", () => { E.description = description.value; updateButtons(); });
  add.addEventListener("click", () => addSpeaker());
  for (const [picture, view] of [[top, "top"], [side, "side"]]) {
    picture.addEventListener("pointermove", onMove);
    picture.addEventListener("pointerup", endDrag);
    picture.addEventListener("pointercancel", endDrag);
    picture.addEventListener("dblclick", (event) => addAt(event, view));
  }
  saveNew.addEventListener("click", () => save(true));
  update.addEventListener("click", () => save(false));
  remove.addEventListener("click", removePreset);
  use.addEventListener("click", () => {
    if (E.presetId) bus.emit("layout-use", { presetId: E.presetId });
  });

  bus.on("catalog-changed", fillStartList);
  bus.on("presets-changed", () => { fillStartList(); updateButtons(); });
  bus.on("stem-selected", summarise);
  startFrom("");
  await loadPresets();
  fillStartList();
  updateButtons();
}

// For the page's own tests and console: the layout being edited, as it would be saved.
export function currentLayout() {
  return body();
}
