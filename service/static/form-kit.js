// Small helpers shared by the settings panel, the room editor and the loudspeaker editor:
// DOM and SVG builders, the bounds of a declared option (GET /v1/options) and their
// check, and problem details (RFC 9457) turned into sentences placed beside the field
// they name.
//
// Nothing here knows a range, a default or a choice list: those come from the server's
// declaration, read at run time.

const SVG_NS = "http://www.w3.org/2000/svg";

/** An element: el("div", { class: "x", onclick: fn }, child, "text", ...). */
export function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  setAttrs(node, attrs);
  for (const c of children.flat()) if (c !== null && c !== undefined && c !== false) node.append(c);
  return node;
}

/** An SVG element, same calling form as el(). */
export function svg(tag, attrs = {}, ...children) {
  const node = document.createElementNS(SVG_NS, tag);
  setAttrs(node, attrs);
  for (const c of children.flat()) if (c !== null && c !== undefined && c !== false) node.append(c);
  return node;
}

function setAttrs(node, attrs) {
  for (const [k, v] of Object.entries(attrs)) {
    if (v === undefined || v === null || v === false) continue;
    if (k === "class") node.setAttribute("class", v);
    else if (k === "text") node.textContent = v;
    else if (k.startsWith("on") && typeof v === "function") node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : String(v));
  }
}

let uid = 0;
/** A page-unique id with a readable prefix (for label "for" and aria links). */
export function uniqueId(prefix) {
  uid += 1;
  return `${prefix}-${uid}`;
}

/** A number for people: no trailing zeros, at most `digits` decimals. */
export function num(value, digits = 2) {
  if (value === null || value === undefined || Number.isNaN(Number(value))) return "n/a";
  return String(Number(Number(value).toFixed(digits)));
}

/**
 * The bounds of a declared option as { min, max, minExclusive, maxExclusive }.
 *
 * GET /v1/options gives "minimum"/"maximum" and "exclusive_minimum"/"exclusive_maximum";
 * the exclusive members may be flags (the bound itself is left out) or the bound (JSON
 * Schema 2020 style). Both readings are accepted.
 */
export function boundsOf(spec) {
  const b = { min: numOrNull(spec.minimum), max: numOrNull(spec.maximum), minExclusive: false, maxExclusive: false };
  if (typeof spec.exclusive_minimum === "number") { b.min = spec.exclusive_minimum; b.minExclusive = true; }
  else if (spec.exclusive_minimum === true) b.minExclusive = true;
  if (typeof spec.exclusive_maximum === "number") { b.max = spec.exclusive_maximum; b.maxExclusive = true; }
  else if (spec.exclusive_maximum === true) b.maxExclusive = true;
  return b;
}

function numOrNull(v) {
  return typeof v === "number" && Number.isFinite(v) ? v : null;
}

/** The range in words, with the unit: "0 to 20 dB", "above -70 and below 0 LUFS". */
export function rangeText(spec) {
  const { min, max, minExclusive, maxExclusive } = boundsOf(spec);
  const unit = spec.unit ? ` ${spec.unit}` : "";
  if (min !== null && max !== null) {
    if (!minExclusive && !maxExclusive) return `${num(min, 6)} to ${num(max, 6)}${unit}`;
    return `${minExclusive ? "above" : "from"} ${num(min, 6)} ${maxExclusive ? "and below" : "to"} ${num(max, 6)}${unit}`;
  }
  if (min !== null) return `${minExclusive ? "above" : "at least"} ${num(min, 6)}${unit}`;
  if (max !== null) return `${maxExclusive ? "below" : "at most"} ${num(max, 6)}${unit}`;
  return "";
}

/**
 * Check a typed number against its declaration. Returns the number, or throws a
 * FieldProblem with a sentence ("LFE gain must be from -20 to 20 dB.").
 */
export function checkNumber(spec, text, label) {
  const raw = String(text).trim();
  if (raw === "") throw new FieldProblem(`${label} needs a value.`);
  const value = Number(raw);
  if (!Number.isFinite(value)) throw new FieldProblem(`${label} must be a number (got “${raw}”).`);
  if (spec.kind === "integer" && !Number.isInteger(value)) throw new FieldProblem(`${label} must be a whole number.`);
  const { min, max, minExclusive, maxExclusive } = boundsOf(spec);
  const low = min !== null && (minExclusive ? value <= min : value < min);
  const high = max !== null && (maxExclusive ? value >= max : value > max);
  if (low || high) throw new FieldProblem(`${label} must be ${rangeText(spec)}; ${num(value, 6)} is out of range.`);
  if (spec.power_of_two && (value < 1 || (value & (value - 1)) !== 0)) {
    throw new FieldProblem(`${label} must be a power of two (such as 4096 or 8192).`);
  }
  return value;
}

/** A problem with one field, in a sentence a person can act on. */
export class FieldProblem extends Error {
  constructor(message, field = null) {
    super(message);
    this.field = field;
  }
}

/** Capitalised, ending with a full stop. */
export function sentence(text) {
  const t = String(text || "").trim();
  if (!t) return "";
  const s = t[0].toUpperCase() + t.slice(1);
  return /[.!?)]$/.test(s) ? s : `${s}.`;
}

const PYDANTIC_WORDS = [
  [/^Input should be less than or equal to (.+)$/i, (m) => `must be at most ${m[1]}`],
  [/^Input should be greater than or equal to (.+)$/i, (m) => `must be at least ${m[1]}`],
  [/^Input should be less than (.+)$/i, (m) => `must be below ${m[1]}`],
  [/^Input should be greater than (.+)$/i, (m) => `must be above ${m[1]}`],
  [/^Input should be a finite number$/i, () => "must be a finite number"],
  [/^Input should be a valid (number|integer).*$/i, (m) => (m[1] === "integer" ? "must be a whole number" : "must be a number")],
  [/^Input should be a valid (string|list|dictionary|object).*$/i, (m) => `has the wrong type (a ${m[1] === "dictionary" ? "JSON object" : m[1]} is expected)`],
  [/^Input should be (.+)$/i, (m) => `must be ${m[1].replace(/'/g, "")}`],
  [/^Field required$/i, () => "is needed"],
  [/^Extra inputs are not permitted$/i, () => "is not a setting this server takes"],
  [/^String should have at most (\d+) characters?$/i, (m) => `is too long (at most ${m[1]} characters)`],
  [/^String should have at least (\d+) characters?$/i, (m) => `is too short (at least ${m[1]} characters)`],
  [/^List should have at most (\d+) items?.*$/i, (m) => `has too many entries (at most ${m[1]})`],
  [/^List should have at least (\d+) items?.*$/i, (m) => `needs at least ${m[1]} entr${m[1] === "1" ? "y" : "ies"}`],
  [/^Value error, (.+)$/i, (m) => m[1]],
  [/^Assertion failed, (.+)$/i, (m) => m[1]],
];

/** A validation message of the API's "errors" list, in plain words (no type names). */
export function plainMessage(message) {
  return plainWords(message).text;
}

// { text, predicate }: predicate = the words go after the field's name ("must be ...");
// otherwise they are a sentence of their own (a renderer's message).
function plainWords(message) {
  const text = String(message || "").trim();
  for (const [re, fn] of PYDANTIC_WORDS) {
    const m = re.exec(text);
    if (m) return { text: fn(m), predicate: !/^(Value|Assertion) /i.test(m[0]) };
  }
  return { text, predicate: false };
}

function withLabel(label, where, message) {
  const { text, predicate } = plainWords(message);
  if (predicate) return sentence(`${label}${where} ${text}`);
  const first = label.split(" ")[0].toLowerCase();
  return text.toLowerCase().startsWith(first) ? sentence(text) : sentence(`${label}${where}: ${text}`);
}

// Words in a renderer's message that tell which field it is about (a room error names the
// room, a layout error a speaker ...), for problems that carry no "errors" list.
const FIELD_HINTS = [
  ["room", /\broom\b|absorption|rt60|listener|dimension|speaker_radius/i],
  ["headphone_eq", /headphone|\beq band|impulse response/i],
  ["channel_order", /channel order|channel_order|file channel/i],
  ["layout", /\blayout\b|speaker|loudspeaker|\blabel\b/i],
  ["hrtf", /\bhrtf\b|\bsofa\b|hrir/i],
];

/**
 * Sort an API error into sentences per option name.
 *
 * Returns { fields: Map(name -> sentence), general: sentence | "" }. `labelOf(name)` gives
 * the field's name as the page shows it; `known` is the set of option names on the page.
 */
export function problemsByField(err, labelOf, known) {
  const fields = new Map();
  const body = err && err.body;
  const list = body && Array.isArray(body.errors) ? body.errors : [];
  for (const item of list) {
    const path = String(item.field || "").split(".").filter((p) => p && p !== "body");
    const name = path.find((p) => known.has(p)) || null;
    const words = plainMessage(item.message);
    if (name) {
      const rest = path.slice(path.indexOf(name) + 1).filter((p) => !/^(float|int|str|literal|list|dict|function|union)\b|\[/.test(p));
      const where = rest.length ? ` (${rest.map((p) => (/^\d+$/.test(p) ? `#${Number(p) + 1}` : p.replace(/_/g, " "))).join(" ")})` : "";
      // A union (a level: number or word) answers once per branch; keep the first.
      if (!fields.has(name)) fields.set(name, withLabel(labelOf(name), where, item.message));
    } else if (!fields.has("")) {
      fields.set("", sentence(`${path.join(" ") || "the request"}: ${words}`));
    }
  }
  let general = fields.get("") || "";
  fields.delete("");
  if (!list.length) {
    const detail = err && err.message ? err.message : "the server refused the request";
    const hint = FIELD_HINTS.find(([name, re]) => known.has(name) && re.test(detail));
    if (hint && err.status === 422) fields.set(hint[0], sentence(detail));
    else general = sentence(detail);
  }
  return { fields, general };
}

/** JSON of plain data with sorted keys, to compare two bodies. */
export function stableJson(value) {
  if (Array.isArray(value)) return `[${value.map(stableJson).join(",")}]`;
  if (value && typeof value === "object") {
    return `{${Object.keys(value).sort().map((k) => `${JSON.stringify(k)}:${stableJson(value[k])}`).join(",")}}`;
  }
  return JSON.stringify(value);
}
