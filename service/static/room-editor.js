// The room part of the settings panel: the figures of a room preset, and the custom room
// editor (dimensions, absorption per surface and band or RT60 per band, listener
// position, loudspeaker distance) with a top view that follows the fields.
//
// The room object it builds is the renderer's room schema (the JSON of a room file, as
// in examples/rooms/), which the render request's "room" option takes. The bands and the
// surfaces are read from the server's room presets (GET /v1/rooms "bands_hz" and
// "absorption"), never written here; the server checks the rest (its 422 is shown
// beside the room).

import { el, FieldProblem, num, svg, uniqueId } from "./form-kit.js";

/** Dimensions of a room as the server describes a preset, or as a room object has them. */
function dims(room) {
  if (Array.isArray(room.dimensions)) {
    const [length, width, height] = room.dimensions;
    return { length, width, height };
  }
  return room.dimensions_m || null;
}

function radiusOf(room) {
  return room.speaker_radius ?? room.speaker_radius_m ?? null;
}

/** Bands (Hz) and surface names the server's presets use; empty when none says. */
export function roomVocabulary(rooms) {
  const withBands = (rooms || []).find((r) => Array.isArray(r.bands_hz) && r.bands_hz.length);
  const withSurfaces = (rooms || []).find((r) => r.absorption && typeof r.absorption === "object");
  return {
    bands: withBands ? withBands.bands_hz.slice() : [],
    surfaces: withSurfaces ? Object.keys(withSurfaces.absorption) : [],
  };
}

function bandName(hz) {
  return hz >= 1000 ? `${num(hz / 1000, 1)} k` : `${num(hz, 0)}`;
}

/** The figures of a room preset (or a custom room's view): size, listener, RT60 per band. */
export function roomFigures(room) {
  const box = el("div", { class: "room-figures" });
  const d = dims(room);
  if (!d) {
    box.append(el("p", { class: "hint" }, room.name === "none"
      ? "No room: the HRTF set alone (anechoic)."
      : "This room has no figures."));
    return box;
  }
  const rows = [
    ["size", `${num(d.length, 2)} × ${num(d.width, 2)} × ${num(d.height, 2)} m (length × width × height)`],
  ];
  if (room.volume_m3) rows.push(["volume", `${num(room.volume_m3, 0)} m³`]);
  if (room.listener) {
    rows.push(["listener", `${num(room.listener.to_front_wall, 2)} m from the front wall, ` +
      `${num(room.listener.to_left_wall, 2)} m from the left, ears at ${num(room.listener.ear_height, 2)} m`]);
  }
  if (radiusOf(room) !== null) rows.push(["loudspeakers at", `${num(radiusOf(room), 2)} m`]);
  const table = el("table", { class: "table compact" },
    el("tbody", {}, rows.map(([k, v]) => el("tr", {}, el("th", { scope: "row" }, k), el("td", {}, v)))));
  box.append(table);
  const rt = room.rt60_target_s || (room.rt60_used === "sabine" ? room.rt60_sabine_s : room.rt60_eyring_s);
  if (Array.isArray(rt) && Array.isArray(room.bands_hz)) {
    const how = room.rt60_target_s ? "asked" : `${room.rt60_used || "eyring"} estimate`;
    box.append(el("table", { class: "table compact bands" },
      el("thead", {}, el("tr", {}, el("th", {}, "Hz"), room.bands_hz.map((b) => el("th", { class: "num" }, bandName(b))))),
      el("tbody", {}, el("tr", {}, el("th", { scope: "row" }, `RT60 (s, ${how})`),
        rt.map((v) => el("td", { class: "num" }, num(v, 2)))))));
  }
  return box;
}

/**
 * A top view of a room: front wall up, the listener, the loudspeaker circle and the
 * layout's loudspeakers on it (ear-level projection), drawn to scale.
 *
 * `room` = { length, width, height, toFront, toLeft, ear, radius }; `layout` optional.
 */
export function roomTopView(room, layout, { size = 220 } = {}) {
  const pad = 22;
  const scale = (size - 2 * pad) / Math.max(room.length, room.width, 0.1);
  const w = room.width * scale;
  const h = room.length * scale;
  const x0 = pad + (size - 2 * pad - w) / 2;
  const y0 = pad;
  const lx = x0 + room.toLeft * scale;
  const ly = y0 + room.toFront * scale;
  const picture = svg("svg", {
    class: "room-view", viewBox: `0 0 ${size} ${h + 2 * pad}`, width: size, height: h + 2 * pad,
    role: "img", "aria-label": `Top view of the room: ${num(room.length)} m long, ${num(room.width)} m wide; listener ${num(room.toFront)} m from the front wall`,
  });
  picture.append(
    svg("rect", { class: "room-walls", x: x0, y: y0, width: w, height: h }),
    svg("text", { class: "room-dim", x: x0 + w / 2, y: y0 - 6, "text-anchor": "middle" }, `front · ${num(room.width)} m`),
    svg("text", { class: "room-dim", x: x0 - 6, y: y0 + h / 2, "text-anchor": "middle", transform: `rotate(-90 ${x0 - 6} ${y0 + h / 2})` }, `${num(room.length)} m`),
  );
  let outside = 0;
  if (room.radius > 0) {
    picture.append(svg("circle", { class: "room-ring", cx: lx, cy: ly, r: room.radius * scale }));
    for (const s of (layout && layout.speakers) || []) {
      if (s.lfe) continue;
      const a = (s.azimuth * Math.PI) / 180;
      const flat = Math.cos((s.elevation * Math.PI) / 180) * room.radius;
      const sx = lx - Math.sin(a) * flat * scale;
      const sy = ly - Math.cos(a) * flat * scale;
      const inside = sx >= x0 - 0.5 && sx <= x0 + w + 0.5 && sy >= y0 - 0.5 && sy <= y0 + h + 0.5;
      if (!inside) outside += 1;
      picture.append(svg("circle", { class: `room-speaker${inside ? "" : " outside"}`, cx: sx, cy: sy, r: 3.5 },
        svg("title", {}, `${s.label}${inside ? "" : " (outside the room)"}`)));
    }
  }
  picture.append(
    svg("circle", { class: "room-listener", cx: lx, cy: ly, r: 5 }, svg("title", {}, "listener")),
    svg("path", { class: "room-nose", d: `M ${lx - 3} ${ly - 4} L ${lx} ${ly - 9} L ${lx + 3} ${ly - 4}` }),
  );
  picture.dataset.outside = String(outside);
  return picture;
}

/** The numbers a top view needs, from a preset's view or a room object. */
export function viewOfRoom(room) {
  const d = dims(room);
  if (!d) return null;
  const l = room.listener || { to_front_wall: d.length / 2, to_left_wall: d.width / 2, ear_height: 1.2 };
  return {
    length: d.length, width: d.width, height: d.height,
    toFront: l.to_front_wall, toLeft: l.to_left_wall, ear: l.ear_height, radius: radiusOf(room) || 0,
  };
}

/**
 * The custom room editor. `rooms` is the server's preset list (for bands, surfaces and a
 * starting point); `onChange()` is called on every edit.
 *
 * Returns { node, read(), write(room), setLayout(layout), showProblem(text) }: read() gives
 * the room object for the request or throws FieldProblem naming the field.
 */
export function createRoomEditor({ rooms, onChange = () => {} }) {
  const vocab = roomVocabulary(rooms);
  const ids = {};
  const inputs = {};
  let layout = null;

  function numberField(key, label, unit, hint) {
    ids[key] = uniqueId(`room-${key}`);
    inputs[key] = el("input", { id: ids[key], type: "number", step: "0.01", inputmode: "decimal", "data-room": key });
    return el("div", { class: "field" },
      el("label", { for: ids[key] }, label, el("span", { class: "unit" }, unit)),
      inputs[key],
      hint ? el("span", { class: "hint" }, hint) : null);
  }

  const name = el("input", { type: "text", id: uniqueId("room-name"), maxlength: "64", "data-room": "name", placeholder: "custom" });
  const modeName = uniqueId("room-mode");
  const byAbsorption = el("input", { type: "radio", name: modeName, value: "absorption", id: `${modeName}-a` });
  const byRt60 = el("input", { type: "radio", name: modeName, value: "rt60", id: `${modeName}-r` });
  if (!vocab.surfaces.length) byAbsorption.disabled = true;

  const bandHeads = vocab.bands.length ? vocab.bands.map((b) => `${bandName(b)} Hz`) : ["every band"];
  const absorptionCells = {};
  const absorptionTable = el("table", { class: "table compact band-grid", "data-part": "absorption" },
    el("thead", {}, el("tr", {}, el("th", {}, "surface"), bandHeads.map((t) => el("th", { class: "num" }, t)))),
    el("tbody", {}, vocab.surfaces.map((s) => {
      absorptionCells[s] = bandHeads.map((t, i) => el("input", {
        type: "number", step: "0.01", min: "0", max: "1", "aria-label": `absorption of the ${s} at ${t}`,
        "data-surface": s, "data-band": i,
      }));
      return el("tr", {}, el("th", { scope: "row" }, s), absorptionCells[s].map((c) => el("td", {}, c)));
    })));
  const rt60Cells = bandHeads.map((t, i) => el("input", {
    type: "number", step: "0.01", min: "0", "aria-label": `RT60 at ${t}`, "data-rt60": i,
  }));
  const rt60Table = el("table", { class: "table compact band-grid", "data-part": "rt60" },
    el("thead", {}, el("tr", {}, el("th", {}, ""), bandHeads.map((t) => el("th", { class: "num" }, t)))),
    el("tbody", {}, el("tr", {}, el("th", { scope: "row" }, "RT60 (s)"), rt60Cells.map((c) => el("td", {}, c)))));

  const drawing = el("div", { class: "room-drawing", "data-part": "drawing" });
  const drawingNote = el("p", { class: "hint room-drawing-note" });
  const problem = el("p", { class: "error field-problem", role: "alert", hidden: true });

  const node = el("div", { class: "room-editor" },
    el("div", { class: "room-grid" },
      el("div", { class: "room-fields" },
        el("div", { class: "field" }, el("label", { for: name.id }, "Room name"), name),
        el("fieldset", { class: "tight" }, el("legend", {}, "Size"),
          el("div", { class: "row3" },
            numberField("length", "Length", "m", "front to back"),
            numberField("width", "Width", "m"),
            numberField("height", "Height", "m"))),
        el("fieldset", { class: "tight" }, el("legend", {}, "Listener"),
          el("div", { class: "row3" },
            numberField("toFront", "To front wall", "m"),
            numberField("toLeft", "To left wall", "m"),
            numberField("ear", "Ear height", "m")),
          numberField("radius", "Loudspeaker distance", "m", "from the listener, for every loudspeaker"))),
      el("div", { class: "room-side" }, drawing, drawingNote)),
    el("fieldset", { class: "tight" }, el("legend", {}, "Surfaces"),
      el("div", { class: "field inline" },
        el("span", { class: "radio" }, byAbsorption, el("label", { for: byAbsorption.id }, "absorption per surface and band")),
        el("span", { class: "radio" }, byRt60, el("label", { for: byRt60.id }, "RT60 per band (uniform absorption solved for it)"))),
      el("div", { class: "band-scroll" }, absorptionTable, rt60Table),
      el("p", { class: "hint" }, "Absorption coefficients run from 0 (reflects all) to 1 (absorbs all); RT60 in seconds.")),
    problem);

  function showMode() {
    const rt = byRt60.checked;
    absorptionTable.hidden = rt;
    rt60Table.hidden = !rt;
  }

  function value(key) {
    return Number(inputs[key].value);
  }

  function redraw() {
    const view = {
      length: value("length"), width: value("width"), height: value("height"),
      toFront: value("toFront"), toLeft: value("toLeft"), ear: value("ear"), radius: value("radius"),
    };
    drawing.replaceChildren();
    if (![view.length, view.width].every((v) => Number.isFinite(v) && v > 0)) {
      drawingNote.textContent = "Give the length and width to see the room.";
      return;
    }
    const picture = roomTopView(view, layout);
    drawing.append(picture);
    const outside = Number(picture.dataset.outside);
    drawingNote.textContent = outside
      ? `${outside} loudspeaker${outside > 1 ? "s are" : " is"} outside the walls at this distance.`
      : `Top view, front wall up; ears at ${num(view.ear)} m of ${num(view.height)} m.`;
    drawingNote.className = outside ? "warn room-drawing-note" : "hint room-drawing-note";
  }

  node.addEventListener("input", () => { problem.hidden = true; redraw(); onChange(); });
  node.addEventListener("change", () => { showMode(); redraw(); onChange(); });

  function write(room) {
    const d = dims(room) || { length: "", width: "", height: "" };
    const l = room.listener || {};
    name.value = room.name && room.name !== "custom" ? room.name : "";
    inputs.length.value = d.length; inputs.width.value = d.width; inputs.height.value = d.height;
    inputs.toFront.value = l.to_front_wall ?? (d.length ? d.length / 2 : "");
    inputs.toLeft.value = l.to_left_wall ?? (d.width ? d.width / 2 : "");
    inputs.ear.value = l.ear_height ?? "";
    inputs.radius.value = radiusOf(room) ?? "";
    const rt = Array.isArray(room.rt60) || typeof room.rt60 === "number" ? room.rt60 : room.rt60_target_s;
    const fill = (cells, values) => cells.forEach((c, i) => {
      const v = Array.isArray(values) ? values[i] : values;
      c.value = v === undefined || v === null ? "" : num(v, 4);
    });
    if (rt !== undefined && rt !== null) {
      byRt60.checked = true;
      fill(rt60Cells, rt);
    } else if (room.absorption && vocab.surfaces.length) {
      byAbsorption.checked = true;
      for (const s of vocab.surfaces) fill(absorptionCells[s], room.absorption[s]);
      const est = room.rt60_eyring_s || room.rt60_sabine_s;
      if (est) fill(rt60Cells, est);
    } else {
      byRt60.checked = true;
    }
    if (!vocab.surfaces.length) byRt60.checked = true;
    problem.hidden = true;
    showMode();
    redraw();
  }

  function need(key, label) {
    const raw = inputs[key].value.trim();
    const v = Number(raw);
    if (raw === "" || !Number.isFinite(v) || v <= 0) {
      inputs[key].setAttribute("aria-invalid", "true");
      throw new FieldProblem(`Room: ${label} must be a positive number of metres.`, "room");
    }
    inputs[key].removeAttribute("aria-invalid");
    return v;
  }

  function bandValues(cells, what, low, high) {
    const values = cells.map((c) => {
      const raw = c.value.trim();
      const v = Number(raw);
      const bad = raw === "" || !Number.isFinite(v) || v < low || (high !== null && v > high) || (low === 0 && what === "RT60" && v === 0);
      if (bad) {
        c.setAttribute("aria-invalid", "true");
        throw new FieldProblem(`Room: ${c.getAttribute("aria-label")} must be ${high !== null ? `from ${low} to ${high}` : "a positive number"}.`, "room");
      }
      c.removeAttribute("aria-invalid");
      return v;
    });
    return values.length === 1 ? values[0] : values;
  }

  function read() {
    const length = need("length", "the length");
    const width = need("width", "the width");
    const height = need("height", "the height");
    const toFront = need("toFront", "the distance to the front wall");
    const toLeft = need("toLeft", "the distance to the left wall");
    const ear = need("ear", "the ear height");
    if (toFront >= length) throw new FieldProblem(`Room: the listener (${num(toFront)} m from the front wall) must be inside the ${num(length)} m length.`, "room");
    if (toLeft >= width) throw new FieldProblem(`Room: the listener (${num(toLeft)} m from the left wall) must be inside the ${num(width)} m width.`, "room");
    if (ear >= height) throw new FieldProblem(`Room: the ears (${num(ear)} m) must be below the ${num(height)} m ceiling.`, "room");
    const room = {
      name: name.value.trim() || "custom",
      dimensions: [length, width, height],
      listener: { to_front_wall: toFront, to_left_wall: toLeft, ear_height: ear },
    };
    if (inputs.radius.value.trim() !== "") room.speaker_radius = need("radius", "the loudspeaker distance");
    if (byRt60.checked) {
      room.rt60 = bandValues(rt60Cells, "RT60", 0, null);
    } else {
      room.absorption = {};
      for (const s of vocab.surfaces) room.absorption[s] = bandValues(absorptionCells[s], "absorption", 0, 1);
    }
    return room;
  }

  function showProblem(text) {
    problem.textContent = text || "";
    problem.hidden = !text;
  }

  function setLayout(next) {
    layout = next;
    redraw();
  }

  return { node, read, write, setLayout, showProblem };
}
