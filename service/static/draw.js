// SVG drawings of the render page: loudspeaker layouts, rooms, and line charts.
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

function niceTicks(lo, hi, count = 6) {
  const span = hi - lo || 1;
  const raw = span / count;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 2.5, 5, 10].map((m) => m * mag).find((s) => s >= raw) || raw;
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push(+v.toFixed(10));
  return out;
}

function fmtFreq(f) {
  return f >= 1000 ? `${+(f / 1000).toFixed(1)}k` : `${Math.round(f)}`;
}

/**
 * A line chart. `series`: [{name, x: [...], y: [...], cls}], `hlines`: [{y, name, cls}].
 * Options: title, xLabel, yLabel, logX, yMin, yMax, xTicks (values for a log axis).
 */
export function lineChart({ title, series, hlines = [], xLabel, yLabel, logX = false,
                            yMin, yMax, xTicks, description }) {
  const W = 640, H = 300, L = 56, Rm = 16, T = 44, B = 44;
  const pw = W - L - Rm, ph = H - T - B;
  const xs = series.flatMap((s) => s.x);
  const ys = series.flatMap((s) => s.y).filter((v) => Number.isFinite(v));
  const tx = logX ? (v) => Math.log10(v) : (v) => v;
  let x0 = Math.min(...xs.map(tx)), x1 = Math.max(...xs.map(tx));
  if (!(x1 > x0)) x1 = x0 + 1;
  let y0 = yMin ?? Math.min(...ys, ...hlines.map((h) => h.y));
  let y1 = yMax ?? Math.max(...ys, ...hlines.map((h) => h.y));
  if (!(y1 > y0)) { y0 -= 1; y1 += 1; }
  const px = (v) => L + ((tx(v) - x0) / (x1 - x0)) * pw;
  const py = (v) => T + (1 - (Math.min(Math.max(v, y0), y1) - y0) / (y1 - y0)) * ph;
  const svg = svgEl("svg", { viewBox: `0 0 ${W} ${H}`, class: "chart", role: "img",
                             "aria-label": description || title });
  svg.append(text(L, 18, title, { class: "chart-title" }));
  const grid = svgEl("g", { class: "grid" });
  for (const v of niceTicks(y0, y1)) {
    grid.append(svgEl("line", { x1: L, x2: L + pw, y1: py(v), y2: py(v) }));
    svg.append(text(L - 6, py(v) + 4, String(v), { class: "tick", "text-anchor": "end" }));
  }
  const xt = xTicks || niceTicks(x0, x1);
  for (const v of xt) {
    const x = logX ? px(v) : px(v);
    if (x < L - 0.5 || x > L + pw + 0.5) continue;
    grid.append(svgEl("line", { x1: x, x2: x, y1: T, y2: T + ph }));
    svg.append(text(x, T + ph + 16, logX ? fmtFreq(v) : String(v), { class: "tick", "text-anchor": "middle" }));
  }
  svg.append(grid);
  svg.append(svgEl("rect", { x: L, y: T, width: pw, height: ph, class: "frame" }));
  svg.append(text(L + pw / 2, H - 6, xLabel, { class: "axis-label", "text-anchor": "middle" }));
  svg.append(text(14, T + ph / 2, yLabel, { class: "axis-label", "text-anchor": "middle", transform: `rotate(-90 14 ${T + ph / 2})` }));
  for (const h of hlines) {
    const line = svgEl("line", { x1: L, x2: L + pw, y1: py(h.y), y2: py(h.y), class: `hline ${h.cls || ""}` });
    svg.append(titled(line, `${h.name}: ${h.y}`));
  }
  const legend = svgEl("g", { class: "chart-legend" });
  let lx = L + pw;
  [...series, ...hlines].reverse().forEach((s) => {
    const label = text(lx, 36, s.name, { "text-anchor": "end", class: `legend ${s.cls || ""}` });
    legend.append(label);
    const width = 6.5 * s.name.length + 20;
    legend.append(svgEl("line", { x1: lx - width + 2, x2: lx - width + 14, y1: 32, y2: 32, class: `swatch ${s.cls || ""}` }));
    lx -= width + 8;
  });
  svg.append(legend);
  for (const s of series) {
    const pts = [];
    s.x.forEach((x, i) => { if (Number.isFinite(s.y[i])) pts.push(`${px(x).toFixed(1)},${py(s.y[i]).toFixed(1)}`); });
    const line = svgEl("polyline", { points: pts.join(" "), class: `series ${s.cls || ""}`, "data-name": s.name });
    svg.append(titled(line, s.name));
  }
  return svg;
}

/** Loudness over time from the report's plots.loudness section. */
export function loudnessChart(loud) {
  const times = (n, start, dt) => Array.from({ length: n }, (_, i) => +(start + i * dt).toFixed(3));
  const m = loud.momentary_lufs || [];
  const s = loud.short_term_lufs || [];
  const series = [
    { name: "momentary", cls: "c1", x: times(m.length, loud.momentary_start_s, loud.momentary_interval_s), y: m },
    { name: "short-term", cls: "c2", x: times(s.length, loud.short_term_start_s, loud.short_term_interval_s), y: s },
  ].filter((x) => x.y.length);
  if (!series.length) return null;
  const hlines = [];
  if (loud.target_lufs !== null && loud.target_lufs !== undefined) hlines.push({ y: loud.target_lufs, name: "target", cls: "target" });
  const top = Math.max(...series.flatMap((x) => x.y), ...hlines.map((h) => h.y));
  return lineChart({
    title: "Loudness over time", series, hlines, xLabel: "time (s)", yLabel: "LUFS",
    yMin: Math.max(Math.floor(top / 5) * 5 - 40, -120), yMax: Math.ceil(top / 5) * 5 + 5,
    description: `Momentary and short-term loudness of the render${hlines.length ? `, target ${loud.target_lufs} LUFS` : ""}`,
  });
}

/** The two ears' third-octave spectra from plots.spectra. */
export function spectraChart(spec) {
  const names = spec.ears || ["left", "right"];
  const series = (spec.levels_db || []).map((y, i) => ({ name: `${names[i]} ear`, cls: `c${i + 1}`, x: spec.centres_hz, y }));
  if (!series.length) return null;
  const top = Math.max(...series.flatMap((s) => s.y));
  return lineChart({
    title: "Ear spectra (1/3 octave)", series, logX: true,
    xTicks: [31.5, 63, 125, 250, 500, 1000, 2000, 4000, 8000, 16000],
    xLabel: "frequency (Hz)", yLabel: "level (dB FS)", yMin: Math.floor(top / 10) * 10 - 60,
    yMax: Math.ceil(top / 10) * 10, description: "Long-term third-octave spectra of the left and right ear signals",
  });
}

/** The room's energy decay per octave band from plots.room_decay. */
export function decayChart(decay) {
  if (!decay || !decay.levels_db || !decay.levels_db.length) return null;
  const series = decay.levels_db.map((y, i) => ({ name: fmtFreq(decay.bands_hz[i]), cls: `b${i}`, x: decay.time_s, y }));
  return lineChart({
    title: `Room energy decay per octave band (${decay.speaker})`, series, hlines: [{ y: -60, name: "-60 dB", cls: "target" }],
    xLabel: "time (s)", yLabel: "dB", yMin: -90, yMax: 0,
    description: "Schroeder energy decay curves of the room response, one per octave band",
  });
}
