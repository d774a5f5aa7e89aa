// The report page: /report/{render_id}. Reads the render (GET /v1/renders/{id}), its report
// (GET /v1/renders/{id}/report) and its stem's name (GET /v1/stems/{id}); shows the summary,
// the notes and warnings, the per-loudspeaker table, the HRTF set and its EQ, headphone EQ
// and calibration, the room, timings and the plots, and offers the report as JSON.
//
// Notes (information every default render shows) are drawn neutral; warnings (a real
// problem with this render) as warnings.

import { api, download } from "./api.js";
import { el } from "./dom.js";
import { askToken, mountChrome, setTitle } from "./chrome.js";
import { decayChart, fmtFreq, loudnessChart, scenePicture, spectraChart } from "./draw.js";

const POLL_MS = 1500;
const $ = (id) => document.getElementById(id);
const renderId = location.pathname.split("/").filter(Boolean).pop() || "";


const has = (v) => v !== null && v !== undefined;

/** A number with a unit, "–" when absent; a minus sign, not a hyphen. */
function num(v, digits = 1, unit = "") {
  if (!has(v) || !Number.isFinite(Number(v))) return "–";
  const text = Number(v).toFixed(digits).replace(/^-/, "−");
  return unit ? `${text} ${unit}` : text;
}

function signed(v, digits = 1, unit = "dB") {
  if (!has(v)) return "–";
  return `${v > 0 ? "+" : ""}${num(v, digits, unit)}`;
}

function duration(seconds) {
  if (!has(seconds)) return "–";
  if (seconds < 60) return `${seconds.toFixed(2)} s`;
  const m = Math.floor(seconds / 60);
  return `${m} min ${(seconds - m * 60).toFixed(1)} s`;
}

function direction(az, el) {
  return `${num(az, 1)}° az, ${num(el, 1)}° el`;
}

/** "2026-12-05 01:10 UTC" from an ISO date. */
function shortDate(iso) {
  if (!iso) return "";
  const m = /^(\d{4}-\d{2}-\d{2})T(\d{2}:\d{2})/.exec(iso);
  return m ? `${m[1]} ${m[2]} UTC` : iso;
}

function facts(rows, label) {
  const table = el("table", { class: "facts", "aria-label": label || null });
  for (const [k, v] of rows) {
    if (v === null || v === undefined) continue;
    table.append(el("tr", {}, el("th", { scope: "row" }, k), el("td", {}, v)));
  }
  return table;
}

/** A table of values per band: columns = bands, rows = [name, values]. */
function bandTable(caption, bands, rows, digits = 2) {
  const table = el("table", { class: "table band-table" }, el("caption", { class: "visually-hidden" }, caption));
  table.append(el("thead", {}, el("tr", {}, el("th", { scope: "col" }, "band (Hz)"),
    ...bands.map((b) => el("th", { scope: "col" }, fmtFreq(Number(b)))))));
  const body = el("tbody");
  for (const [name, values] of rows) {
    if (!values) continue;
    body.append(el("tr", {}, el("th", { scope: "row" }, name),
      ...bands.map((_, i) => el("td", {}, num(values[i], digits)))));
  }
  table.append(body);
  return table;
}

// --------------------------------------------------------------------------- naming

function stemName(stem, report) {
  if (stem && stem.files && stem.files.length) {
    return stem.files.length === 1 ? stem.files[0].name : `${stem.files[0].name} + ${stem.files.length - 1} more`;
  }
  const files = (report.input && report.input.files) || [];
  return files.length ? files.join(", ") : "stem";
}

function roomName(report) {
  const room = report.room;
  if (!room) return "no room";
  if (room.room && room.room.name) return `room ${room.room.name}`;
  return room.requested ? `room ${room.requested}` : "measured room";
}

/** The render's name: stem, layout, room, HRTF set, date. */
export function reportName(report, stem) {
  const fold = report.fold && report.fold.mode === "stereo";
  const parts = [stemName(stem, report), report.layout ? report.layout.name : null,
    report.solo ? `solo ${report.solo.label}` : null,
    fold ? "stereo fold-down" : roomName(report),
    !fold && report.hrtf ? `HRTF ${report.hrtf.name}` : null, shortDate(report.created)];
  return parts.filter(Boolean).join(" · ");
}

// ------------------------------------------------------------------------- sections

function summarySection(report, view) {
  const inp = report.input || {};
  const out = report.output || {};
  const d = report.delivery;
  const req = (view && view.request) || {};
  const rows = [
    ["stem", `${stemName(state.stem, report)} · ${inp.channels} channels · ${inp.samplerate} Hz · ${duration(inp.duration_s)}`],
    ["layout", report.layout ? `${report.layout.name}${report.layout.description ? ` (${report.layout.description})` : ""}` +
      `${report.layout.source ? ` · ${report.layout.source}` : ""}` : null],
    ["channel order", report.channel_order ? `${report.channel_order.labels.join(" ")} (${report.channel_order.source})` : null],
  ];
  if (report.fold && report.fold.mode === "stereo") rows.push(["fold", "stereo fold-down" +
    `${report.fold.source ? ` (${report.fold.source})` : ""}: no HRTF, no room`]);
  else if (report.fold) rows.push(["fold", `${report.fold.mode}`]);
  else if (has(req.fold) && req.fold !== "binaural") rows.push(["fold", String(req.fold)]);
  if (report.solo) rows.push(["solo", `loudspeaker ${report.solo.label} alone (file channel ${report.solo.channel}), the others silent`]);
  else if (has(req.solo)) rows.push(["solo", `loudspeaker ${req.solo} alone`]);
  rows.push(["output", `${out.file || ""} · ${out.format || ""} ${out.subtype || ""} · ${out.channels} channels · ` +
    `${duration(out.frames && out.samplerate ? out.frames / out.samplerate : null)}`]);
  if (d) {
    const target = d.target === "match" ? `the stem's own loudness (${num(d.target_lufs, 1, "LUFS")})`
      : has(d.target_lufs) ? num(d.target_lufs, 1, "LUFS") : "none (no gain)";
    const inLufs = has(d.input_integrated_lufs) ? `stem ${num(d.input_integrated_lufs, 1, "LUFS")}, ` : "";
    const o = d.output || {};
    rows.push(
      ["loudness target", target],
      ["loudness in → out", `${inLufs}render ${num(d.render_integrated_lufs, 1, "LUFS")} → ${num(o.integrated_lufs, 1, "LUFS")}`],
      ["gain", signed(d.gain_db, 2)],
      ["true peak before → after", `${num(d.true_peak_before_dbtp, 1)} → ${num(d.true_peak_after_dbtp, 1, "dBTP")}`],
      ["limiter", d.limiter && d.limiter.enabled
        ? `ceiling ${num(d.ceiling_dbtp, 1, "dBTP")}, at most ${num(d.limiter.max_gain_reduction_db, 2, "dB")} of gain reduction ` +
          `(${d.limiter.samples_limited} samples), look-ahead ${num(d.limiter.lookahead_ms, 1, "ms")}, release ${num(d.limiter.release_ms, 0, "ms")}`
        : "off"],
      ["loudness range", num(o.loudness_range_lu, 1, "LU")],
      ["max momentary / short-term", `${num(o.momentary_max_lufs, 1)} / ${num(o.short_term_max_lufs, 1, "LUFS")}`],
    );
  } else {
    rows.push(["loudness", "no loudness stage: the output keeps the render's level (no gain, no limiter)"]);
  }
  rows.push(["sample peak", num(out.peak_dbfs, 2, "dBFS")], ["clipped samples", String(out.clipped_samples ?? "–")]);
  if (report.fold && report.fold.mode === "stereo") rows.push(["LFE", "left out (as ITU-R BS.775 folds down)"]);
  else if (report.lfe) rows.push(["LFE", `low-pass ${num(report.lfe.cutoff_hz, 0, "Hz")} (order ${report.lfe.order}), gain ${signed(report.lfe.gain_db, 1)}`]);
  const box = el("div", {}, facts(rows, "Summary"));
  const asked = Object.entries(req).filter(([k, v]) => k !== "stem_id" && v !== null && v !== undefined);
  if (asked.length) {
    box.append(el("details", { class: "asked" }, el("summary", {}, "Settings asked for"),
      facts(asked.map(([k, v]) => [k.replaceAll("_", " "),
        typeof v === "object" ? el("code", {}, JSON.stringify(v)) : String(v)]), "Settings asked for")));
  }
  return box;
}

function messagesSection(report) {
  const notes = report.notes || [];
  const warnings = report.warnings || [];
  const box = el("div");
  if (!notes.length && !warnings.length) {
    box.append(el("p", { class: "ok" }, "No notes and no warnings."));
    return box;
  }
  if (warnings.length) {
    box.append(el("h3", {}, `Warnings (${warnings.length})`),
      el("ul", { class: "messages", id: "warnings" }, ...warnings.map((w) => el("li", { class: "warn" }, w))));
  }
  if (notes.length) {
    box.append(el("h3", {}, `Notes (${notes.length})`),
      el("ul", { class: "messages", id: "notes" }, ...notes.map((n) => el("li", { class: "note" }, n))));
  }
  return box;
}

/** Decoders and normalisations in words. */
const DECODER_WORDS = {
  magls: "MagLS (magnitude least squares, diffuse-field covariance constraint)",
  virtual: "virtual loudspeakers on a t-design",
};
const NORM_WORDS = { sn3d: "SN3D (AmbiX)", n3d: "N3D", fuma: "FuMa (W X Y Z)" };

/** The scene section: what was decoded, how, turned how far, and the directions drawn. */
function sceneSection(report) {
  const sc = report.scene;
  const deg = (v) => `${Number.isInteger(Number(v)) ? Number(v) : num(v, 1)}°`;
  const chosen = sc.decoder_chosen === "requested" ? "as asked" : sc.decoder_chosen || "chosen";
  const box = el("div");
  const dec = sc.decoder || {};
  const rot = sc.rotation;
  const turned = rot
    ? `turned by ${deg(rot.yaw_deg)} yaw, ${deg(rot.pitch_deg)} pitch and ${deg(rot.roll_deg)} roll before decoding`
    : "not rotated";
  const method = DECODER_WORDS[dec.method] || dec.method || "–";
  box.append(el("p", { "data-part": "scene-words" },
    `An order-${sc.order} Ambisonic scene of ${sc.channels} channels (${sc.channel_order}, ` +
    `${NORM_WORDS[sc.normalisation] || sc.normalisation}), decoded to the ears by ` +
    `${dec.method === "magls" ? "the MagLS decoder" : "a virtual-loudspeaker decoder"} ` +
    `(${chosen}), ${turned}.`));
  const dirs = dec.directions || [];
  box.append(facts([
    ["order", String(sc.order)],
    ["channels", `${sc.channels} (${sc.channel_order})`],
    ["normalisation", NORM_WORDS[sc.normalisation] || sc.normalisation],
    ["decoder", method],
    ["why this decoder", sc.decoder_chosen || null],
    ["crossover", has(dec.cutoff_hz) ? `${num(dec.cutoff_hz, 0)} Hz (MagLS above)` : has(dec.crossover_hz) ? `${num(dec.crossover_hz, 0)} Hz` : null],
    ["weighting", dec.weighting || null],
    ["directions", `${dirs.length}${dec.grid ? ` · ${dec.grid}` : ""}`],
    ["rotation", rot ? `yaw ${deg(rot.yaw_deg)}, pitch ${deg(rot.pitch_deg)}, roll ${deg(rot.roll_deg)}` : "none"],
    ["filter length", has(dec.taps) ? `${dec.taps} taps` : null],
    ["room", sc.room ? (typeof sc.room === "string" ? sc.room : JSON.stringify(sc.room)) : "none (a scene carries its own room)"],
    ["level", sc.calibration || null],
  ], "Ambisonic scene"));
  const notes = sc.decoder_notes || [];
  if (notes.length) box.append(el("ul", { class: "messages" }, ...notes.map((n) => el("li", { class: "note" }, n))));
  box.append(scenePicture(sc, dirs, { caption: `dots: the ${dec.method === "magls" ? "decoder's grid" : "virtual loudspeakers"}` }));
  return box;
}

/** The ADM section: the programme rendered, its counts, and every object's path summary
    from report.adm.objects_rendered. */
function admSection(report) {
  const adm = report.adm;
  const rows = adm.objects_rendered || [];
  const count = (n, one, many) => `${n} ${n === 1 ? one : many}`;
  const p = adm.programme || {};
  const hoaTracks = (adm.hoa || []).reduce((acc, h) => acc + (h.tracks || []).length, 0);
  $("adm-words").textContent =
    `An ADM master (${adm.container || "WAV"}, ${count(adm.channels, "track", "tracks")}): ` +
    `${p.id ? `programme “${p.name || p.id}” (${p.id})` : "every object (no programme in the file)"} rendered as its metadata places it, ` +
    `${count(rows.length, "object", "objects")}, ${count((adm.beds || []).length, "bed loudspeaker", "bed loudspeakers")}` +
    `${hoaTracks ? `, ${count(hoaTracks, "HOA track", "HOA tracks")}` : ""}; one level for all of them, ` +
    `calibrated on ${adm.calibration_reference === "5.0" ? "ITU-R BS.2051 0+5+0" : "the master's bed"}.`;
  const dir = (d) => (Array.isArray(d) ? `${num(d[0], 1)}° az, ${num(d[1], 1)}° el` : "–");
  const span = (a, b) => `${num(a, 2)} s to ${has(b) ? `${num(b, 2)} s` : "the end"}`;
  const body = rows.map((o) => el("tr", { "data-object": o.object },
    el("th", { scope: "row" }, o.object || "", el("span", { class: "muted" }, ` ${o.object_id || ""}`),
      o.muted ? el("span", { class: "chip warn" }, " muted") : null),
    el("td", { class: "num" }, String(o.track ?? "")),
    el("td", {}, span(o.start_s, o.end_s)),
    el("td", {}, dir(o.first_direction_deg)),
    el("td", {}, dir(o.last_direction_deg)),
    el("td", { "data-part": "moves" }, Array.isArray(o.moves_s) ? `${num(o.moves_s[0], 2)} s to ${num(o.moves_s[1], 2)} s` : "at rest"),
    el("td", { class: "num" }, String(o.breakpoints ?? "–")),
    el("td", { "data-part": "rendered" }, o.rendered || "–"),
    el("td", { "data-part": "not-rendered" }, (o.not_rendered || []).length ? o.not_rendered.join(", ") : "–")));
  $("adm-objects").querySelector("tbody").replaceChildren(...body);
  const more = [];
  if (adm.objects_method) {
    more.push(el("p", { class: "muted", "data-part": "adm-method" }, `How objects are rendered: ${adm.objects_method}.`));
  }
  const ignored = adm.ignored || [];
  if (ignored.length) {
    more.push(el("h3", {}, "Not rendered"),
      el("ul", { class: "messages", "data-part": "adm-ignored" }, ...ignored.map((why) => el("li", { class: "warn" }, why))));
  }
  if ((adm.beds || []).length) {
    more.push(el("p", { class: "muted", "data-part": "adm-beds" },
      `Bed: ${adm.beds.map((b) => `${b.label || "?"} (track ${b.track + 1})`).join(", ")}.`));
  }
  $("adm-more").replaceChildren(...more);
}

function speakerRows(report) {
  return (report.speakers || []).map((s) => {
    let asked, how, used, error;
    if (has(s.acn)) {
      // A scene's channel: a spherical harmonic, not a loudspeaker.
      asked = `degree ${s.degree}, index ${s.index}`;
      how = "spherical harmonic";
      used = el("span", { class: "muted" }, "all directions, through the decoder");
      error = "–";
    } else if (s.lfe || s.method === "lfe") {
      asked = "no direction (LFE)";
      how = s.method === "lfe" || !s.method ? "LFE" : s.method;
      used = has(s.cutoff_hz)
        ? el("span", {}, `low-pass ${num(s.cutoff_hz, 0, "Hz")}, gain ${signed(s.gain_db, 1)}, to both ears`)
        : el("span", { class: "muted" }, "not used");
      error = "–";
    } else if (!has(s.azimuth) && report.adm) {
      // An ADM object's track: it moves, so it has no one direction (see the Objects section).
      asked = "an object's path";
      how = "moving source";
      used = el("span", { class: "muted" }, "the HRTF set's directions along the path (Objects, above)");
      error = "–";
    } else if (s.method === "fold") {
      asked = direction(s.azimuth, s.elevation);
      how = "stereo fold-down";
      used = el("span", {}, `to left × ${num(s.left, 4)}, to right × ${num(s.right, 4)}`);
      error = "–";
    } else {
      asked = direction(s.azimuth, s.elevation);
      how = s.method || "–";
      const list = s.measured || s.used || [];
      used = list.length
        ? el("ul", { class: "used" }, ...list.map((m) => el("li", {}, `${direction(m.azimuth, m.elevation)} × ${num(m.weight, 3)}`)))
        : el("span", { class: "muted" }, "none");
      error = has(s.angular_error_deg) ? `${num(s.angular_error_deg, 1)}°` : "–";
    }
    return el("tr", { "data-label": s.label },
      el("td", { class: "num" }, String(s.channel ?? "")),
      el("th", { scope: "row" }, s.label || ""),
      el("td", {}, asked), el("td", {}, how), el("td", {}, used),
      el("td", { class: "num" }, error),
      el("td", {}, s.lfe ? "–" : s.room === true ? "yes" : s.room === false ? "no" : "–"));
  });
}

function foldSection(fold) {
  const box = el("div");
  box.append(el("p", {}, "A plain stereo fold-down: each loudspeaker feeds the left and right outputs with fixed gains; no HRTF and no room."),
    facts([["source", fold.source], ["rule", fold.rule]], "Fold-down"));
  const coeffs = fold.coefficients || [];
  if (coeffs.length) {
    const t = el("table", { class: "table", id: "fold-table" }, el("thead", {}, el("tr", {},
      ...["loudspeaker", "to left", "to right", "to left (dB)", "to right (dB)"].map((h, i) => el("th", { scope: "col", class: i ? "num" : null }, h)))));
    t.append(el("tbody", {}, ...coeffs.map((c) => el("tr", {}, el("th", { scope: "row" }, c.label),
      el("td", { class: "num" }, num(c.left, 4)), el("td", { class: "num" }, num(c.right, 4)),
      el("td", { class: "num" }, has(c.left_db) ? num(c.left_db, 2) : "off"),
      el("td", { class: "num" }, has(c.right_db) ? num(c.right_db, 2) : "off")))));
    box.append(t);
  }
  return box;
}

function hrtfSection(report) {
  if (report.fold && !report.hrtf) {
    $("h-hrtf").textContent = "Stereo fold-down (no HRTF)";
    return foldSection(report.fold);
  }
  const h = report.hrtf || {};
  const box = el("div");
  box.append(facts([
    ["set", h.name],
    ["file", h.file],
    ["convention", h.convention],
    ["measurements", has(h.measurements) ? String(h.measurements) : null],
    ["sample rate", has(h.samplerate) ? `${num(h.samplerate, 0)} Hz` : null],
    ["length", has(h.taps) ? `${h.taps} taps` : null],
    ["SHA-256", h.sha256 ? el("code", { title: h.sha256 }, `${h.sha256.slice(0, 16)}…`) : null],
  ], "HRTF set"));
  const eq = report.eq || {};
  box.append(el("h3", {}, "HRTF EQ"));
  if (!eq.type || eq.type === "none") {
    box.append(el("p", { class: "muted" }, "none: the set's responses as measured"));
    return box;
  }
  const df = eq.diffuse_field;
  box.append(facts([
    ["type", eq.type],
    ["why", eq.chosen],
    ["weighting", df ? df.weighting : null],
    ["largest boost / cut", df ? `${num(df.max_boost_db, 1, "dB")} / ${num(df.max_cut_db, 1, "dB")}` : null],
    ["boost limit reached", df ? (df.boost_limited ? "yes: the deepest dips are only partly filled" : "no") : null],
    ["band used", df && df.usable_band_hz ? `${num(df.usable_band_hz[0], 0)} – ${num(df.usable_band_hz[1], 0)} Hz` : null],
    ["length", df && df.taps ? `${df.taps} taps` : null],
  ], "HRTF EQ"));
  if (df && df.octave_bands_db) {
    const bands = Object.keys(df.octave_bands_db);
    box.append(bandTable("EQ gain per octave band (dB)", bands, [["gain (dB)", bands.map((b) => df.octave_bands_db[b])]], 1));
  }
  return box;
}

function headphoneSection(report) {
  const box = el("div");
  const hp = (report.eq || {}).headphone;
  box.append(el("h3", {}, "Headphone EQ"));
  if (!hp) {
    box.append(el("p", { class: "muted" }, "none"));
  } else {
    box.append(facts([
      ["kind", hp.kind],
      ["name", hp.name || hp.file || hp.id || null],
      ["overall gain", has(hp.gain_db) ? signed(hp.gain_db, 1) : null],
      ["channels", has(hp.channels) ? String(hp.channels) : null],
      ["source sample rate", has(hp.source_samplerate) ? `${hp.source_samplerate} Hz` : null],
      ["length", has(hp.taps) ? `${hp.taps} taps` : null],
    ], "Headphone EQ"));
    if (hp.bands && hp.bands.length) {
      const t = el("table", { class: "table" }, el("thead", {}, el("tr", {},
        ...["type", "frequency", "gain", "Q"].map((h, i) => el("th", { scope: "col", class: i ? "num" : null }, h)))));
      t.append(el("tbody", {}, ...hp.bands.map((b) => el("tr", {}, el("td", {}, b.type),
        el("td", { class: "num" }, num(b.frequency, 0, "Hz")), el("td", { class: "num" }, signed(b.gain_db, 1)),
        el("td", { class: "num" }, num(b.q, 2))))));
      box.append(t);
    }
  }
  const c = report.calibration;
  box.append(el("h3", {}, "Calibration"));
  box.append(c ? facts([["gain", signed(c.gain_db, 2)], ["reference", c.reference], ["applied", c.applied]], "Calibration")
    : el("p", { class: "muted" }, "none"));
  return box;
}

function roomSection(report) {
  const box = el("div");
  const r = report.room;
  if (!r) {
    box.append(el("p", { class: "muted" }, "No room: the render is anechoic (direct sound of each loudspeaker only)."));
    return box;
  }
  const room = r.room || {};
  const dim = room.dimensions_m;
  const lis = room.listener;
  box.append(facts([
    ["room", room.name ? `${room.name}${room.description ? ` (${room.description})` : ""}` : (r.requested || "measured")],
    ["kind", r.synthetic === false ? "measured responses" : "modelled (image sources and a diffuse tail)"],
    ["mode", r.mode],
    ["dimensions", dim ? `${dim.length} × ${dim.width} × ${dim.height} m (length × width × height)` : null],
    ["volume, surface", has(room.volume_m3) ? `${num(room.volume_m3, 1)} m³, ${num(room.surface_m2, 1)} m²` : null],
    ["listener", lis ? `${lis.to_front_wall} m from the front wall, ${lis.to_left_wall} m from the left wall, ears at ${lis.ear_height} m` : null],
    ["loudspeaker distance", has(room.speaker_radius_m) ? `${room.speaker_radius_m} m` : null],
    ["reflection order", has(r.order) ? String(r.order) : null],
    ["mixing time", has(r.mixing_time_ms) ? `${num(r.mixing_time_ms, 1, "ms")}${room.mixing_time_from ? ` (${room.mixing_time_from})` : ""}` : null],
    ["RT60 used", room.rt60_used || null],
  ], "Room"));
  const bands = room.bands_hz || (r.rt60_measured && r.rt60_measured.bands_hz) || [];
  if (bands.length) {
    const m = r.rt60_measured || {};
    box.append(el("h3", {}, "Reverberation per octave band (s)"),
      bandTable("Reverberation per octave band", bands, [
        ["mean absorption", room.mean_absorption],
        ["RT60 target", room.rt60_target_s],
        ["RT60 Sabine", room.rt60_sabine_s],
        ["RT60 Eyring", room.rt60_eyring_s],
        ["RT60 asked", r.rt60_requested_s],
        ["T20 measured", m.t20_s],
        ["T30 measured", m.t30_s],
        ["EDT measured", m.edt_s],
        ["critical distance (m)", room.critical_distance_m],
      ]));
    if (m.what) box.append(el("p", { class: "hint" }, `Measured: ${m.what}.`));
  }
  const spk = r.speakers || [];
  if (spk.length) {
    const t = el("table", { class: "table", id: "room-speakers" }, el("thead", {}, el("tr", {},
      ...["loudspeaker", "distance", "reflections", "direct-to-reverberant"].map((h, i) => el("th", { scope: "col", class: i ? "num" : null }, h)))));
    t.append(el("tbody", {}, ...spk.map((s) => el("tr", {}, el("th", { scope: "row" }, s.label),
      el("td", { class: "num" }, num(s.distance_m, 2, "m")), el("td", { class: "num" }, String(s.reflections ?? "–")),
      el("td", { class: "num" }, num(s.drr_db, 1, "dB"))))));
    box.append(el("h3", {}, "Per loudspeaker"), t);
  }
  return box;
}

function timingsSection(report) {
  const t = report.timings_s || {};
  const e = report.engine || {};
  return facts([
    ["plan (filters)", num(t.plan, 2, "s")],
    ["render", num(t.render, 2, "s")],
    ["loudness stage", num(t.delivery, 2, "s")],
    ["total", num(t.total, 2, "s")],
    ["speed", has(t.x_real_time) ? `${num(t.x_real_time, 1)} × real time` : null],
    ["engine", has(e.block_size) ? `blocks of ${e.block_size}, ${e.partitions} partition(s), filters of ${e.filter_length} taps` : null],
    ["earfold", report.earfold_version || null],
    ["platform", report.platform ? `Python ${report.platform.python}, ${report.platform.machine}` : null],
  ], "Timings");
}

function plotsSection(report) {
  const box = $("charts");
  box.replaceChildren();
  const plots = report.plots;
  if (!plots) {
    box.append(el("p", { class: "note" }, "This report has no plot data."));
    return;
  }
  const charts = [
    [loudnessChart(plots.loudness), plots.loudness && plots.loudness.what, "chart-loudness"],
    [spectraChart(plots.spectra), plots.spectra && plots.spectra.what, "chart-spectra"],
    [decayChart(plots.room_decay), plots.room_decay && plots.room_decay.what, "chart-decay"],
  ];
  for (const [chart, what, id] of charts) {
    if (!chart) continue;
    chart.id = id;
    box.append(el("figure", {}, chart, what ? el("figcaption", { class: "hint" }, what) : null));
  }
  if (!box.children.length) box.append(el("p", { class: "muted" }, "No plot data in this report."));
}

// ------------------------------------------------------------------------ the page

const state = { view: null, report: null, stem: null };

function showMessage(text) {
  $("report-message").textContent = text;
  $("report-message").hidden = false;
  $("report-loading").hidden = true;
}

function fileStem() {
  const name = stemName(state.stem, state.report).replace(/\.[^.]+$/, "").replace(/[^\w.-]+/g, "-");
  return `${name || "render"}-${renderId.slice(0, 8)}`;
}

function downloadJson() {
  const blob = new Blob([JSON.stringify(state.report, null, 2) + "\n"], { type: "application/json" });
  const url = URL.createObjectURL(blob);
  const a = el("a", { href: url, download: `${fileStem()}.report.json` });
  document.body.append(a);
  a.click();
  a.remove();
  setTimeout(() => URL.revokeObjectURL(url), 60_000);
}

function show() {
  const { report, view } = state;
  const name = reportName(report, state.stem);
  $("report-title").textContent = `Report: ${name}`;
  setTitle(`Report: ${name}`);
  $("report-sub").textContent = `render ${renderId}`;
  if (view && view.request && view.request.stem_id) $("back").href = `/#stem=${view.request.stem_id}`;
  $("summary-body").replaceChildren(summarySection(report, view));
  $("messages-body").replaceChildren(messagesSection(report));
  $("speaker-table").querySelector("tbody").replaceChildren(...speakerRows(report));
  $("sec-scene").hidden = !report.scene;
  if (report.scene) {
    $("scene-body").replaceChildren(sceneSection(report));
    $("h-speakers").textContent = "Channels";
  }
  $("sec-adm").hidden = !report.adm;
  if (report.adm) {
    admSection(report);
    $("h-speakers").textContent = "Tracks";
  }
  $("hrtf-body").replaceChildren(hrtfSection(report));
  $("headphone-body").replaceChildren(headphoneSection(report));
  $("room-body").replaceChildren(roomSection(report));
  $("timings-body").replaceChildren(timingsSection(report));
  $("report-loading").hidden = true;
  $("report-body").hidden = false;
  plotsSection(report);
  $("download-json").disabled = false;
  $("download-audio").disabled = false;
  document.body.dataset.state = "ready";
}

async function load() {
  if (!/^[0-9a-f]{32}$/.test(renderId)) {
    showMessage(`"${renderId}" is not a render id (32 hexadecimal digits).`);
    document.body.dataset.state = "failed";
    return;
  }
  try {
    state.view = await api(`/v1/renders/${renderId}`);
  } catch (err) {
    if (err.status === 401) { await askToken(); return load(); }
    showMessage(err.status === 404 ? "There is no such render (it may have been deleted, or belong to another token)."
      : `The render cannot be read: ${err.message}`);
    document.body.dataset.state = "failed";
    return;
  }
  const v = state.view;
  if (v.state !== "done") {
    if (v.state === "failed" || v.state === "cancelled") {
      showMessage(`This render ${v.state === "failed" ? "failed" : "was cancelled"}${v.message ? `: ${v.message}` : ""}; it has no report.`);
      document.body.dataset.state = "failed";
      return;
    }
    $("report-loading").textContent = `The render is ${v.state}` +
      (has(v.progress) ? ` (${Math.round(v.progress * 100)} %)` : "") + "; the report appears when it is done.";
    setTimeout(load, POLL_MS);
    return;
  }
  try {
    const [report, stem] = await Promise.all([
      api(`/v1/renders/${renderId}/report`),
      v.request && v.request.stem_id ? api(`/v1/stems/${v.request.stem_id}`).catch(() => null) : null,
    ]);
    state.report = report;
    state.stem = stem;
  } catch (err) {
    showMessage(`The report cannot be read: ${err.message}`);
    document.body.dataset.state = "failed";
    return;
  }
  show();
}

mountChrome({ title: "Report", current: "" });
$("download-json").addEventListener("click", downloadJson);
$("download-audio").addEventListener("click", () => {
  download(`/v1/renders/${renderId}/audio`, `${fileStem()}.wav`).catch((err) => showMessage(`The audio cannot be downloaded: ${err.message}`));
});
load();

// For tests and the curious: the report as read.
window.earfoldReport = { report: () => state.report, view: () => state.view };
