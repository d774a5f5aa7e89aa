// SVG drawings: loudspeaker layouts, rooms, and line charts with a value readout.
//
// Everything is drawn in the browser from the API's JSON. Directions follow the renderer's
// convention (renderer/geometry.py): azimuth in degrees counter-clockwise from the front,
// positive to the left, elevation up. The top views put the front at the top of the
// picture and the listener's left on the left.

const SVG_NS = "http://www.w3.org/2000/svg";

/** Make an SVG element with attributes and children. */
export function svgEl(tag, attrs = {}, children = []) {
  const el = document.createElementNS(SVG_NS, tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v !== undefined && v !== null) el.setAttribute(k, String(v));
  }
  for (const c of children) el.append(c);
  return el;
}

function text(x, y, content, attrs = {}) {
  const t = svgEl("text", { x, y, ...attrs });
  t.textContent = content;
  return t;
}

function titled(el, title) {
  const t = svgEl("title");
  t.textContent = title;
  el.prepend(t);
  return el;
}

/** Screen position (x right, y down) of a direction on a top view of radius r. */
export function topViewPoint(azimuthDeg, elevationDeg, r) {
  const az = (azimuthDeg * Math.PI) / 180;
  const el = (elevationDeg * Math.PI) / 180;
  const rho = r * Math.cos(el); // projection onto the floor plane
  return { x: -rho * Math.sin(az), y: -rho * Math.cos(az) };
}

function layer(elevation) {
  if (elevation >= 75) return "zenith";
  if (elevation > 10) return "upper";
  if (elevation < -10) return "lower";
  return "ear";
}

/** Radius of each layer's ring on the top view (ear level on the middle ring). */
const LAYER_RADIUS = { ear: 92, upper: 56, zenith: 0, lower: 118 };

/**
 * Top view of a layout: the listener in the middle, each loudspeaker at its azimuth on
 * the ring of its layer. Ear-level loudspeakers are circles on the middle ring, raised
 * ones filled diamonds on the inner ring (overhead: at the centre), lowered ones dashed
 * diamonds on the outer ring; LFE channels sit in a box below (they have no direction).
 * Rings stand for layers, not for distances, so that labels of stacked loudspeakers
 * (ear level and raised at the same azimuth) do not collide.
 */
export function layoutPicture(layout) {
  const speakers = layout.speakers || [];
  const directional = speakers.filter((s) => !s.lfe);
  const lfe = speakers.filter((s) => s.lfe);
  const kinds = new Set(directional.map((s) => layer(s.elevation)));
  const raised = directional.filter((s) => s.elevation > 10).length;
  const lowered = directional.filter((s) => s.elevation < -10).length;
  const svg = svgEl("svg", {
    viewBox: "-150 -150 300 330", role: "img",
    class: `layout-picture${directional.length > 16 ? " dense" : ""}`,
    "aria-label": `Top view of layout ${layout.name}: ${directional.length} loudspeakers` +
      (lfe.length ? ` and ${lfe.length} LFE` : "") + `. ${raised} raised, ${lowered} lowered.`,
  });
  svg.append(svgEl("circle", { cx: 0, cy: 0, r: LAYER_RADIUS.ear, class: "ring" }));
  if (kinds.has("upper")) svg.append(svgEl("circle", { cx: 0, cy: 0, r: LAYER_RADIUS.upper, class: "ring ring-upper" }));
  if (kinds.has("lower")) svg.append(svgEl("circle", { cx: 0, cy: 0, r: LAYER_RADIUS.lower, class: "ring ring-upper" }));
  // The listener: a head with a nose pointing to the front, and two ears.
  svg.append(svgEl("ellipse", { cx: -13, cy: 0, rx: 3, ry: 6, class: "head" }));
  svg.append(svgEl("ellipse", { cx: 13, cy: 0, rx: 3, ry: 6, class: "head" }));
  svg.append(svgEl("circle", { cx: 0, cy: 0, r: 12, class: "head" }));
  svg.append(svgEl("path", { d: "M -4 -11 L 0 -18 L 4 -11", class: "head" }));
  svg.append(text(0, -140, "front", { class: "axis-note", "text-anchor": "middle" }));
  for (const s of directional) {
    const kind = layer(s.elevation);
    const r = LAYER_RADIUS[kind];
    const p = topViewPoint(s.azimuth, 0, r);
    let mark;
    if (kind === "ear") {
      mark = svgEl("circle", { cx: p.x, cy: p.y, r: 7, class: "spk spk-ear" });
    } else {
      const d = 8;
      mark = svgEl("path", {
        d: `M ${p.x} ${p.y - d} L ${p.x + d} ${p.y} L ${p.x} ${p.y + d} L ${p.x - d} ${p.y} Z`,
        class: `spk spk-${kind}`,
      });
    }
    const g = svgEl("g", { class: "speaker", "data-label": s.label, "data-layer": kind }, [mark]);
    // Labels away from the centre, but towards it on the inner ring (clear of the middle
    // ring's labels), and beside an overhead one.
    const len = Math.hypot(p.x, p.y);
    let ux = len > 1 ? p.x / len : 1;
    const uy = len > 1 ? p.y / len : 0;
    const out = kind === "upper" ? -15 : 16;
    // An overhead loudspeaker sits on the head; its label goes just below the head.
    const lx = kind === "zenith" ? 0 : p.x + ux * out;
    const ly = kind === "zenith" ? 30 : p.y + uy * out + 4;
    if (kind === "zenith") ux = 0;
    const towards = kind === "upper" ? -ux : ux;
    g.append(text(lx, ly, s.label, { class: "spk-label", "text-anchor": Math.abs(ux) < 0.3 ? "middle" : towards > 0 ? "start" : "end" }));
    titled(g, `${s.label}: azimuth ${s.azimuth}°, elevation ${s.elevation}°`);
    svg.append(g);
  }
  // Legend and LFE box.
  const legendY = 160;
  svg.append(svgEl("circle", { cx: -138, cy: legendY, r: 5, class: "spk spk-ear" }));
  svg.append(text(-128, legendY + 4, "ear level", { class: "legend" }));
  svg.append(svgEl("path", { d: `M -68 ${legendY - 6} L -62 ${legendY} L -68 ${legendY + 6} L -74 ${legendY} Z`, class: "spk spk-upper" }));
  svg.append(text(-57, legendY + 4, "raised", { class: "legend" }));
  svg.append(svgEl("path", { d: `M -10 ${legendY - 6} L -4 ${legendY} L -10 ${legendY + 6} L -16 ${legendY} Z`, class: "spk spk-lower" }));
  svg.append(text(1, legendY + 4, "lowered", { class: "legend" }));
  if (lfe.length) {
    svg.append(svgEl("rect", { x: 70, y: legendY - 8, width: 72, height: 16, rx: 3, class: "spk spk-lfe" }));
    svg.append(text(106, legendY + 4, lfe.map((s) => s.label).join(" "), { class: "legend", "text-anchor": "middle" }));
  }
  return svg;
}

/**
 * Floor plan of a shoebox room (front wall at the top) with the listener and the circle
 * the loudspeakers stand on; null for "none".
 */
export function roomPicture(room) {
  if (!room || !room.dimensions_m) return null;
  const { length, width, height } = room.dimensions_m;
  const scale = 200 / Math.max(length, width);
  const w = width * scale;
  const h = length * scale;
  const svg = svgEl("svg", {
    viewBox: `-30 -30 ${w + 60} ${h + 70}`, class: "room-picture", role: "img",
    "aria-label": `Floor plan of room ${room.name}: ${length} by ${width} m, ${height} m high`,
  });
  svg.append(svgEl("rect", { x: 0, y: 0, width: w, height: h, class: "room-walls" }));
  const lx = (room.listener ? room.listener.to_left_wall : width / 2) * scale;
  const ly = (room.listener ? room.listener.to_front_wall : length / 2) * scale;
  if (room.speaker_radius_m) {
    svg.append(svgEl("circle", { cx: lx, cy: ly, r: room.speaker_radius_m * scale, class: "ring" }));
  }
  svg.append(svgEl("circle", { cx: lx, cy: ly, r: 5, class: "head" }));
  svg.append(svgEl("path", { d: `M ${lx - 3} ${ly - 4} L ${lx} ${ly - 9} L ${lx + 3} ${ly - 4}`, class: "head" }));
  svg.append(text(w / 2, -10, `front wall · ${width} m`, { class: "axis-note", "text-anchor": "middle" }));
  svg.append(text(-12, h / 2, `${length} m`, { class: "axis-note", "text-anchor": "middle", transform: `rotate(-90 -12 ${h / 2})` }));
  svg.append(text(w / 2, h + 24, `height ${height} m`, { class: "axis-note", "text-anchor": "middle" }));
  return svg;
}

// ------------------------------------------------------------------------ line charts
//
// Every series gets a colour (the --series-1..6 tokens of base.css, so both themes work)
// AND a dash pattern, so that two series stay apart in grey print, for readers who do not
// tell the colours apart, and where two colours are close. Reference lines (a loudness
// target, a decay floor) are drawn in colours of their own, never a series colour.

/** Dash patterns in turn: solid, dashed, dotted, dash-dot. */
export const DASHES = ["", "7 4", "1.5 3", "8 3 1.5 3"];

/** Colour and dash of series number `i` (0-based): no two of the first 24 share both. */
export function seriesStyle(i) {
  const colour = i % 6;
  const dash = (i + Math.floor(i / 6)) % DASHES.length;
  return { colour: `var(--series-${colour + 1})`, dash: DASHES[dash], index: i };
}

/** Reference lines: each kind its own colour and pattern (none is a series colour). */
const REFERENCE_STYLE = {
  target: { colour: "var(--text)", dash: "10 4 2 4" },
  floor: { colour: "var(--text-muted)", dash: "4 3" },
  limit: { colour: "var(--error)", dash: "10 4 2 4" },
};

function niceTicks(lo, hi, count = 6) {
  const span = hi - lo || 1;
  const raw = span / count;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 2.5, 5, 10].map((m) => m * mag).find((s) => s >= raw) || raw;
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push(+v.toFixed(10));
  return out;
}

/** "31.5", "500", "1k", "16k". */
export function fmtFreq(f) {
  return f >= 1000 ? `${+(f / 1000).toFixed(1)}k` : `${+f.toFixed(1)}`;
}

function fmtValue(v, digits) {
  if (v === null || v === undefined || !Number.isFinite(v)) return "–";
  return v.toFixed(digits).replace("-", "−");
}

/** Index of the point of sorted `xs` nearest to `x` (in the transformed space `t`). */
function nearest(xs, x, t) {
  let lo = 0, hi = xs.length - 1;
  if (hi < 0) return -1;
  const tx = t(x);
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (t(xs[mid]) < tx) lo = mid; else hi = mid;
  }
  return Math.abs(t(xs[lo]) - tx) <= Math.abs(t(xs[hi]) - tx) ? lo : hi;
}

/**
 * A line chart (SVG) with a legend and a readout: moving the pointer over the plot (or
 * the arrow keys when the chart has focus) shows a crosshair and the value of every
 * series at that x.
 *
 * `series`: [{name, x: [...], y: [...]}] (x ascending; null or NaN y leaves a gap);
 * `hlines`: [{y, name, kind: "target" | "floor" | "limit"}];
 * options: title, xLabel, yLabel, xUnit, yUnit, xDigits, yDigits, logX, yMin, yMax,
 * xTicks (values for a log axis), xFormat (tick label), description.
 */
export function lineChart({ title, series, hlines = [], xLabel, yLabel, xUnit = "", yUnit = "",
                            xDigits = 2, yDigits = 1, logX = false, yMin, yMax, xTicks, xFormat,
                            description }) {
  const W = 640, L = 58, Rm = 18, T = 30, B = 46;
  const legendItems = [...series.map((s, i) => ({ name: s.name, style: seriesStyle(i) })),
    ...hlines.map((h) => ({ name: h.name, style: REFERENCE_STYLE[h.kind] || REFERENCE_STYLE.target }))];
  // Legend items flow left to right and wrap (width estimated from the text length).
  const pw = W - L - Rm;
  const place = [];
  let cx = 0, row = 0;
  for (const item of legendItems) {
    const w = 34 + 6.9 * item.name.length + 18;
    if (cx > 0 && cx + w > pw) { cx = 0; row += 1; }
    place.push({ x: L + cx, row });
    cx += w;
  }
  const legendH = (row + 1) * 18 + 6;
  const ph = 220;
  const top = T + legendH;
  const H = top + ph + B;
  const tx = logX ? (v) => Math.log10(v) : (v) => v;
  const xs = series.flatMap((s) => s.x).filter((v) => Number.isFinite(v) && (!logX || v > 0));
  const ys = series.flatMap((s) => s.y).filter((v) => v !== null && Number.isFinite(v));
  let x0 = Math.min(...xs.map(tx)), x1 = Math.max(...xs.map(tx));
  if (!Number.isFinite(x0)) { x0 = 0; x1 = 1; }
  if (!(x1 > x0)) x1 = x0 + 1;
  let y0 = yMin ?? Math.min(...ys, ...hlines.map((h) => h.y));
  let y1 = yMax ?? Math.max(...ys, ...hlines.map((h) => h.y));
  if (!Number.isFinite(y0) || !Number.isFinite(y1)) { y0 = -1; y1 = 1; }
  if (!(y1 > y0)) { y0 -= 1; y1 += 1; }
  const px = (v) => L + ((tx(v) - x0) / (x1 - x0)) * pw;
  const py = (v) => top + (1 - (Math.min(Math.max(v, y0), y1) - y0) / (y1 - y0)) * ph;
  const fx = xFormat || ((v) => (logX ? fmtFreq(v) : String(v)));

  const svg = svgEl("svg", { viewBox: `0 0 ${W} ${H}`, class: "chart", role: "img", tabindex: 0,
                             "aria-label": `${description || title}. Move the pointer over the plot, or use the arrow keys, to read the values.` });
  svg.append(text(L, 18, title, { class: "chart-title" }));

  // Legend: a line sample drawn exactly as its series (colour, dash, width), then the name.
  const legend = svgEl("g", { class: "chart-legend" });
  legendItems.forEach((item, i) => {
    const lx = place[i].x;
    const ly = T + place[i].row * 18 + 8;
    legend.append(svgEl("line", { x1: lx, x2: lx + 26, y1: ly, y2: ly, class: "swatch",
      style: `stroke:${item.style.colour}`, "stroke-dasharray": item.style.dash || null }));
    legend.append(text(lx + 32, ly + 4, item.name, { class: "legend" }));
  });
  svg.append(legend);

  const grid = svgEl("g", { class: "grid" });
  for (const v of niceTicks(y0, y1)) {
    grid.append(svgEl("line", { x1: L, x2: L + pw, y1: py(v), y2: py(v) }));
    svg.append(text(L - 6, py(v) + 4, String(v).replace("-", "−"), { class: "tick", "text-anchor": "end" }));
  }
  for (const v of xTicks || niceTicks(x0, x1)) {
    const x = px(v);
    if (x < L - 0.5 || x > L + pw + 0.5) continue;
    grid.append(svgEl("line", { x1: x, x2: x, y1: top, y2: top + ph }));
    svg.append(text(x, top + ph + 16, fx(v), { class: "tick", "text-anchor": "middle" }));
  }
  svg.prepend(grid);
  svg.append(svgEl("rect", { x: L, y: top, width: pw, height: ph, class: "frame" }));
  svg.append(text(L + pw / 2, H - 8, xLabel, { class: "axis-label", "text-anchor": "middle" }));
  svg.append(text(16, top + ph / 2, yLabel, { class: "axis-label", "text-anchor": "middle",
    transform: `rotate(-90 16 ${top + ph / 2})` }));

  for (const h of hlines) {
    const st = REFERENCE_STYLE[h.kind] || REFERENCE_STYLE.target;
    const line = svgEl("line", { x1: L, x2: L + pw, y1: py(h.y), y2: py(h.y), class: `hline ref-${h.kind || "target"}`,
      style: `stroke:${st.colour}`, "stroke-dasharray": st.dash, "data-name": h.name });
    svg.append(titled(line, `${h.name}: ${h.y}${yUnit ? " " + yUnit : ""}`));
  }
  series.forEach((s, i) => {
    const st = seriesStyle(i);
    // Gaps (null) split the line into runs.
    const runs = [];
    let run = [];
    s.x.forEach((x, k) => {
      const y = s.y[k];
      if (y === null || !Number.isFinite(y) || (logX && !(x > 0))) { if (run.length) runs.push(run); run = []; return; }
      run.push(`${px(x).toFixed(1)},${py(y).toFixed(1)}`);
    });
    if (run.length) runs.push(run);
    const g = svgEl("g", { class: "series", "data-name": s.name, "data-series": i });
    for (const r of runs) {
      g.append(svgEl("polyline", { points: r.join(" "), style: `stroke:${st.colour}`,
        "stroke-dasharray": st.dash || null }));
    }
    svg.append(titled(g, s.name));
  });

  // The readout: crosshair, a dot on every series, and a box with the values.
  const readout = svgEl("g", { class: "readout", visibility: "hidden", "aria-hidden": "true" });
  const cross = svgEl("line", { y1: top, y2: top + ph, class: "crosshair" });
  readout.append(cross);
  const dots = series.map((s, i) => {
    const d = svgEl("circle", { r: 3.5, class: "readout-dot", style: `fill:${seriesStyle(i).colour}` });
    readout.append(d);
    return d;
  });
  const box = svgEl("rect", { class: "readout-box", rx: 4, height: 18 * (series.length + 1) + 6 });
  readout.append(box);
  const lines = [svgEl("text", { class: "readout-text readout-x" }),
    ...series.map(() => svgEl("text", { class: "readout-text" }))];
  for (const t of lines) readout.append(t);
  svg.append(readout);
  const hit = svgEl("rect", { x: L, y: top, width: pw, height: ph, class: "hit" });
  svg.append(hit);

  const base = series.find((s) => s.x.length) || { x: [] };
  let cursor = -1; // index into base.x for keyboard stepping
  function showAt(xv) {
    readout.setAttribute("visibility", "visible");
    const cx = px(xv);
    cross.setAttribute("x1", cx); cross.setAttribute("x2", cx);
    lines[0].textContent = `${xLabel ? xLabel.replace(/ \(.*\)$/, "") : "x"}: ${logX ? fmtFreq(xv) : fmtValue(xv, xDigits)}${xUnit ? " " + xUnit : ""}`;
    const values = series.map((s, i) => {
      const k = nearest(s.x, xv, tx);
      const y = k < 0 ? null : s.y[k];
      const ok = y !== null && y !== undefined && Number.isFinite(y);
      dots[i].setAttribute("visibility", ok ? "visible" : "hidden");
      if (ok) { dots[i].setAttribute("cx", px(s.x[k])); dots[i].setAttribute("cy", py(y)); }
      lines[i + 1].textContent = `${s.name}: ${ok ? fmtValue(y, yDigits) : "–"}${ok && yUnit ? " " + yUnit : ""}`;
      return ok ? y : null;
    });
    const width = 12 + 6.6 * Math.max(...lines.map((t) => t.textContent.length));
    const bx = cx + 12 + width > L + pw ? cx - 12 - width : cx + 12;
    box.setAttribute("x", bx); box.setAttribute("y", top + 6); box.setAttribute("width", width);
    lines.forEach((t, i) => { t.setAttribute("x", bx + 7); t.setAttribute("y", top + 22 + 18 * i); });
    svg.dataset.readout = JSON.stringify({ x: xv, values });
  }
  function hide() { readout.setAttribute("visibility", "hidden"); delete svg.dataset.readout; }
  function fromPointer(ev) {
    const ctm = svg.getScreenCTM();
    if (!ctm) return null;
    const pt = new DOMPoint(ev.clientX, ev.clientY).matrixTransform(ctm.inverse());
    const t = x0 + ((Math.min(Math.max(pt.x, L), L + pw) - L) / pw) * (x1 - x0);
    return logX ? 10 ** t : t;
  }
  hit.addEventListener("pointermove", (ev) => {
    const xv = fromPointer(ev);
    if (xv === null) return;
    cursor = nearest(base.x, xv, tx);
    showAt(xv);
  });
  hit.addEventListener("pointerleave", hide);
  svg.addEventListener("blur", hide);
  svg.addEventListener("keydown", (ev) => {
    if (!base.x.length || !["ArrowLeft", "ArrowRight", "Home", "End", "Escape"].includes(ev.key)) return;
    ev.preventDefault();
    if (ev.key === "Escape") { hide(); return; }
    const n = base.x.length;
    const step = ev.shiftKey ? Math.max(1, Math.round(n / 10)) : 1;
    if (ev.key === "Home") cursor = 0;
    else if (ev.key === "End") cursor = n - 1;
    else cursor = Math.min(n - 1, Math.max(0, (cursor < 0 ? 0 : cursor) + (ev.key === "ArrowLeft" ? -step : step)));
    showAt(base.x[cursor]);
  });
  return svg;
}

/** Times of `n` points from `start` every `dt` seconds. */
function times(n, start, dt) {
  return Array.from({ length: n }, (_, i) => +(start + i * dt).toFixed(3));
}

/** Loudness over time from the report's plots.loudness section (null without data). */
export function loudnessChart(loud) {
  if (!loud) return null;
  const m = loud.momentary_lufs || [];
  const s = loud.short_term_lufs || [];
  const series = [
    { name: "momentary (400 ms)", x: times(m.length, loud.momentary_start_s, loud.momentary_interval_s), y: m },
    { name: "short-term (3 s)", x: times(s.length, loud.short_term_start_s, loud.short_term_interval_s), y: s },
  ].filter((x) => x.y.length);
  if (!series.length) return null;
  const hlines = [];
  if (loud.target_lufs !== null && loud.target_lufs !== undefined) {
    hlines.push({ y: loud.target_lufs, name: `target ${String(loud.target_lufs).replace("-", "−")} LUFS`, kind: "target" });
  }
  const finite = series.flatMap((x) => x.y).filter((v) => v !== null && Number.isFinite(v));
  const top = Math.max(...finite, ...hlines.map((h) => h.y));
  return lineChart({
    title: "Loudness over time", series, hlines, xLabel: "time (s)", yLabel: "loudness (LUFS)",
    xUnit: "s", yUnit: "LUFS", xDigits: 1,
    yMin: Math.max(Math.floor(top / 5) * 5 - 40, -120), yMax: Math.ceil(top / 5) * 5 + 5,
    description: `Momentary and short-term loudness of the render${hlines.length ? `, with the target of ${loud.target_lufs} LUFS` : ""}`,
  });
}

/** The two ears' third-octave spectra from plots.spectra (null without data). */
export function spectraChart(spec) {
  if (!spec) return null;
  const names = spec.ears || ["left", "right"];
  const series = (spec.levels_db || []).map((y, i) => ({ name: `${names[i]} ear`, x: spec.centres_hz, y }));
  if (!series.length) return null;
  const finite = series.flatMap((s) => s.y).filter((v) => v !== null && Number.isFinite(v));
  const top = Math.max(...finite);
  return lineChart({
    title: "Ear spectra (1/3 octave)", series, logX: true,
    xTicks: [31.5, 63, 125, 250, 500, 1000, 2000, 4000, 8000, 16000],
    xLabel: "frequency (Hz)", yLabel: "level (dB FS)", xUnit: "Hz", yUnit: "dB",
    yMin: Math.floor(top / 10) * 10 - 60, yMax: Math.ceil(top / 10) * 10,
    description: "Long-term third-octave spectra of the left and right ear signals",
  });
}

/** The room's energy decay per octave band from plots.room_decay (null without data). */
export function decayChart(decay) {
  if (!decay || !decay.levels_db || !decay.levels_db.length) return null;
  const series = decay.levels_db.map((y, i) => ({ name: `${fmtFreq(decay.bands_hz[i])} Hz`, x: decay.time_s, y }));
  return lineChart({
    title: `Room energy decay per octave band (${decay.speaker})`, series,
    hlines: [{ y: -60, name: "−60 dB (RT60)", kind: "floor" }],
    xLabel: "time (s)", yLabel: "level (dB)", xUnit: "s", yUnit: "dB", xDigits: 3, yMin: -90, yMax: 0,
    description: "Schroeder energy decay curves of the room response, one per octave band",
  });
}

/** Size of the scene pictures (top view square, elevation view strip). */
const SCENE_TOP = { size: 220, radius: 92 };
const SCENE_SIDE = { width: 400, height: 210, left: 32, right: 10, top: 12, bottom: 22 };

/**
 * The picture of an Ambisonic scene: no loudspeakers, a sphere of directions. ``scene``
 * is a listing of GET /v1/layouts (``order``, ``channels``) or a report's scene section;
 * ``directions`` are [azimuth, elevation] pairs in degrees (the t-design of the order's
 * virtual loudspeakers, or the decoder's own). Two views, as the Speakers tab draws a
 * layout: from above (front up, left to the left; the distance from the centre is the
 * zenith angle, so the ear-level ring is solid and the lower half lies outside it) and
 * the elevation view (all around unrolled, left half = the listener's left). Directions
 * are small dots: filled above the ear plane, hollow below it.
 */
/** Distance from the centre of a whole-sphere top view (sphereTop) of elevation `elv`:
    the zenith at the centre, ear level on the middle ring, the nadir on the outer one. */
function sphereRadius(elv) {
  return (SCENE_TOP.radius * (90 - elv)) / 180;
}

/** The frame of a whole-sphere top view: rings every 30° of elevation (solid at ear
    level), the axes, the listener's head facing the front (the top). */
function sphereTop(view, label) {
  const c = SCENE_TOP.size / 2;
  const top = svgEl("svg", {
    class: `scene-view ${view}`, viewBox: `0 0 ${SCENE_TOP.size} ${SCENE_TOP.size}`,
    role: "img", "data-view": view, "aria-label": label,
  });
  for (const elv of [60, 30, 0, -30, -60]) {
    top.append(svgEl("circle", { cx: c, cy: c, r: sphereRadius(elv), class: elv === 0 ? "ring ring-ear" : "ring" }));
  }
  top.append(
    svgEl("line", { class: "axis", x1: c, y1: c - SCENE_TOP.radius - 4, x2: c, y2: c + SCENE_TOP.radius + 4 }),
    svgEl("line", { class: "axis", x1: c - SCENE_TOP.radius - 4, y1: c, x2: c + SCENE_TOP.radius + 4, y2: c }),
    text(c + 5, 10, "front", { class: "view-word" }),
    text(3, c - 5, "left", { class: "view-word" }),
    text(SCENE_TOP.size - 3, c - 5, "right", { class: "view-word", "text-anchor": "end" }),
    text(SCENE_TOP.size - 3, SCENE_TOP.size - 4, "solid ring: ear level", { class: "ring-label", "text-anchor": "end" }),
    svgEl("circle", { class: "head", cx: c, cy: c, r: 8 }),
    svgEl("path", { class: "head", d: `M ${c - 4} ${c - 7} L ${c} ${c - 13} L ${c + 4} ${c - 7}` }),
  );
  return top;
}

export function scenePicture(scene, directions, { caption = "" } = {}) {
  const dirs = (directions || []).filter((d) => Array.isArray(d) && d.length >= 2);
  const order = scene.order;
  const channels = scene.channels || (order + 1) ** 2;
  const words = `order ${order} · ${channels} channels · ${dirs.length} directions`;
  const c = SCENE_TOP.size / 2;
  const top = sphereTop("scene-top",
    `Top view of an order-${order} Ambisonic scene: ${dirs.length} directions on the sphere`);
  const w = SCENE_SIDE.width - SCENE_SIDE.left - SCENE_SIDE.right;
  const h = SCENE_SIDE.height - SCENE_SIDE.top - SCENE_SIDE.bottom;
  const side = svgEl("svg", {
    class: "scene-view scene-side", viewBox: `0 0 ${SCENE_SIDE.width} ${SCENE_SIDE.height}`,
    role: "img", "data-view": "scene-side",
    "aria-label": `Elevation view of an order-${order} Ambisonic scene: azimuth across, elevation up`,
  });
  for (let az = 180; az >= -180; az -= 45) {
    const x = SCENE_SIDE.left + ((180 - az) / 360) * w;
    side.append(svgEl("line", { class: az === 0 ? "axis" : "grid", x1: x, y1: SCENE_SIDE.top, x2: x, y2: SCENE_SIDE.top + h }),
      text(x, SCENE_SIDE.height - 6, `${az}°`, { class: "ring-label", "text-anchor": "middle" }));
  }
  for (let elv = 90; elv >= -90; elv -= 30) {
    const y = SCENE_SIDE.top + ((90 - elv) / 180) * h;
    side.append(svgEl("line", { class: elv === 0 ? "axis" : "grid", x1: SCENE_SIDE.left, y1: y, x2: SCENE_SIDE.left + w, y2: y }),
      text(SCENE_SIDE.left - 4, y + 3, `${elv}°`, { class: "ring-label", "text-anchor": "end" }));
  }
  const dot = dirs.length > 200 ? 1.6 : dirs.length > 60 ? 2.2 : 3; // a dense grid stays readable
  for (const [az, elv] of dirs) {
    const kind = elv < -0.5 ? "below" : "above";
    const p = topViewPoint(az, 0, sphereRadius(elv));
    const tip = `azimuth ${Math.round(az * 10) / 10}°, elevation ${Math.round(elv * 10) / 10}°`;
    top.append(titled(svgEl("circle", { cx: c + p.x, cy: c + p.y, r: dot, class: `dir-dot dir-${kind}`, "data-direction": "" }), tip));
    const x = SCENE_SIDE.left + ((180 - wrapAzimuth(az)) / 360) * w;
    const y = SCENE_SIDE.top + ((90 - elv) / 180) * h;
    side.append(titled(svgEl("circle", { cx: x, cy: y, r: dot, class: `dir-dot dir-${kind}`, "data-direction": "" }), tip));
  }
  const figure = document.createElement("figure");
  figure.className = "scene-picture";
  figure.dataset.part = "scene-picture";
  figure.dataset.order = String(order);
  const cap = document.createElement("figcaption");
  cap.className = "scene-words";
  cap.textContent = caption ? `${words} · ${caption}` : words;
  figure.append(cap, top, side);
  return figure;
}

function wrapAzimuth(az) {
  let a = ((((az + 180) % 360) + 360) % 360) - 180;
  if (a === -180) a = 180;
  return a;
}

const HEIGHT_VIEW = { width: 400, height: 150, left: 32, right: 10, top: 10, bottom: 24 };

/** Unit vector (x front, y left, z up) of a direction in degrees. */
function unitVector(azDeg, elDeg) {
  const az = (azDeg * Math.PI) / 180;
  const elv = (elDeg * Math.PI) / 180;
  return [Math.cos(elv) * Math.cos(az), Math.cos(elv) * Math.sin(az), Math.sin(elv)];
}

/**
 * Where an object of GET /v1/stems/{id}/objects is at time `t` (s): its samples joined
 * by straight lines between their unit vectors (so a path across the back does not wrap
 * round through the front), null outside its samples or where its gain is 0.
 */
export function objectAt(path, t) {
  const ts = path.times_s || [];
  if (!ts.length || t < ts[0] || t > ts[ts.length - 1]) return null;
  let k = 0;
  while (k < ts.length - 2 && ts[k + 1] <= t) k += 1;
  const span = ts[k + 1] !== undefined ? ts[k + 1] - ts[k] : 0;
  const f = span > 0 ? Math.min(1, Math.max(0, (t - ts[k]) / span)) : 0;
  const j = Math.min(k + 1, ts.length - 1);
  const a = unitVector(path.azimuth_deg[k], path.elevation_deg[k]);
  const b = unitVector(path.azimuth_deg[j], path.elevation_deg[j]);
  const v = a.map((x, i) => x + (b[i] - x) * f);
  const n = Math.hypot(...v) || 1;
  const gain = path.gain[k] + (path.gain[j] - path.gain[k]) * f;
  if (!(gain > 0)) return null;
  return {
    azimuth: (Math.atan2(v[1], v[0]) * 180) / Math.PI,
    elevation: (Math.asin(Math.max(-1, Math.min(1, v[2] / n))) * 180) / Math.PI,
    gain,
  };
}

/**
 * An ADM master's objects over time, from GET /v1/stems/{id}/objects: each object's path
 * on a whole-sphere top view (the zenith at the centre, ear level on the solid ring, as
 * the scene picture), begun with a hollow circle and ended with a filled square; the
 * height of each object over time on a second view (time across, elevation up); the bed
 * loudspeakers as small grey squares on the top view. Each object has its own colour and
 * dash pattern (seriesStyle), named in a legend. `figure.setTime(t)` puts a marker on
 * every object playing at `t` seconds and a line at `t` on the height view.
 */
export function objectPathsPicture(overview, { caption = "" } = {}) {
  const paths = overview.paths || [];
  const beds = (overview.bed_directions || []).filter((b) => !b.lfe);
  const duration = Math.max(1e-6, Number(overview.duration_s) || 0);
  const c = SCENE_TOP.size / 2;
  const top = sphereTop("paths-top",
    `Top view of ${paths.length} object path${paths.length === 1 ? "" : "s"}: the front at the top, ` +
    "the zenith in the middle, ear level on the solid ring");
  const at = (az, elv) => {
    const p = topViewPoint(az, 0, sphereRadius(elv));
    return [c + p.x, c + p.y];
  };
  for (const bed of beds) {
    const [x, y] = at(bed.azimuth_deg, bed.elevation_deg);
    top.append(titled(svgEl("rect", { class: "bed-mark", x: x - 2.5, y: y - 2.5, width: 5, height: 5, "data-bed": bed.label || "" }),
      `bed loudspeaker ${bed.label || ""} (track ${bed.track}): ${Math.round(bed.azimuth_deg)}° az, ${Math.round(bed.elevation_deg)}° el`));
  }
  const W = HEIGHT_VIEW.width - HEIGHT_VIEW.left - HEIGHT_VIEW.right;
  const H = HEIGHT_VIEW.height - HEIGHT_VIEW.top - HEIGHT_VIEW.bottom;
  const xOf = (t) => HEIGHT_VIEW.left + (Math.min(Math.max(t, 0), duration) / duration) * W;
  const yOf = (elv) => HEIGHT_VIEW.top + ((90 - elv) / 180) * H;
  const side = svgEl("svg", {
    class: "scene-view paths-height", viewBox: `0 0 ${HEIGHT_VIEW.width} ${HEIGHT_VIEW.height}`,
    role: "img", "data-view": "paths-height",
    "aria-label": "Height of each object over time: time across, elevation up",
  });
  for (let elv = 90; elv >= -90; elv -= 45) {
    side.append(svgEl("line", { class: elv === 0 ? "axis" : "grid", x1: HEIGHT_VIEW.left, y1: yOf(elv), x2: HEIGHT_VIEW.left + W, y2: yOf(elv) }),
      text(HEIGHT_VIEW.left - 4, yOf(elv) + 3, `${elv}°`, { class: "ring-label", "text-anchor": "end" }));
  }
  for (let i = 0; i <= 4; i += 1) {
    const t = (duration * i) / 4;
    side.append(text(xOf(t), HEIGHT_VIEW.height - 8, `${t < 10 ? t.toFixed(2) : t.toFixed(1)} s`,
      { class: "ring-label", "text-anchor": i === 0 ? "start" : i === 4 ? "end" : "middle" }));
  }
  const cursor = svgEl("line", { class: "time-line", x1: xOf(0), y1: HEIGHT_VIEW.top, x2: xOf(0), y2: HEIGHT_VIEW.top + H, "data-part": "time-line" });
  side.append(cursor);
  const markers = [];
  const legend = document.createElement("ul");
  legend.className = "path-legend";
  paths.forEach((path, i) => {
    const style = seriesStyle(i);
    const n = (path.times_s || []).length;
    if (!n) return;
    const points = path.times_s.map((_, k) => at(path.azimuth_deg[k], path.elevation_deg[k]));
    const line = (pts, view) => svgEl("polyline", {
      class: "object-path", points: pts.map(([x, y]) => `${x.toFixed(1)},${y.toFixed(1)}`).join(" "),
      stroke: style.colour, "stroke-dasharray": style.dash || null, "data-object": path.object, "data-view-of": view,
    });
    const tip = `${path.object} (track ${path.track})`;
    top.append(titled(line(points, "top"), tip));
    const [x0, y0] = points[0];
    const [x1, y1] = points[n - 1];
    top.append(
      titled(svgEl("circle", { class: "path-start", cx: x0, cy: y0, r: 3.5, stroke: style.colour, "data-start": path.object }), `${tip}: start`),
      titled(svgEl("rect", { class: "path-end", x: x1 - 3, y: y1 - 3, width: 6, height: 6, fill: style.colour, "data-end": path.object }), `${tip}: end`),
    );
    const heights = path.times_s.map((t, k) => [xOf(t), yOf(path.elevation_deg[k])]);
    side.append(titled(line(heights, "height"), tip));
    const mark = svgEl("circle", { class: "path-now", r: 5, fill: style.colour, "data-now": path.object, visibility: "hidden" });
    const markSide = svgEl("circle", { class: "path-now", r: 3.5, fill: style.colour, visibility: "hidden" });
    top.append(mark);
    side.append(markSide);
    markers.push({ path, mark, markSide });
    const moving = new Set(path.azimuth_deg.map((a, k) => `${a},${path.elevation_deg[k]}`)).size > 1;
    const swatch = svgEl("svg", { class: "swatch", viewBox: "0 0 24 8", width: 24, height: 8, "aria-hidden": "true" },
      [svgEl("line", { x1: 0, y1: 4, x2: 24, y2: 4, stroke: style.colour, "stroke-width": 2.5, "stroke-dasharray": style.dash || null })]);
    const item = document.createElement("li");
    item.dataset.object = path.object;
    item.append(swatch, ` ${path.object} · track ${path.track}` +
      `${moving ? "" : " · at rest"}${path.muted ? " · muted" : ""}`);
    legend.append(item);
  });
  const figure = document.createElement("figure");
  figure.className = "scene-picture paths-picture";
  figure.dataset.part = "adm-picture";
  const cap = document.createElement("figcaption");
  cap.className = "scene-words";
  const words = `${paths.length} object${paths.length === 1 ? "" : "s"} · ${beds.length} bed loudspeaker${beds.length === 1 ? "" : "s"} drawn (an LFE has no direction)` +
    " · circle: start, square: end";
  cap.textContent = caption ? `${words} · ${caption}` : words;
  figure.append(cap, top, side, legend);
  figure.setTime = (t) => {
    cursor.setAttribute("x1", xOf(t));
    cursor.setAttribute("x2", xOf(t));
    for (const { path, mark, markSide } of markers) {
      const now = objectAt(path, t);
      mark.setAttribute("visibility", now ? "visible" : "hidden");
      markSide.setAttribute("visibility", now ? "visible" : "hidden");
      if (!now) continue;
      const [x, y] = at(now.azimuth, now.elevation);
      mark.setAttribute("cx", x);
      mark.setAttribute("cy", y);
      markSide.setAttribute("cx", xOf(t));
      markSide.setAttribute("cy", yOf(now.elevation));
    }
    figure.dataset.time = String(t);
  };
  figure.setTime(0);
  return figure;
}
