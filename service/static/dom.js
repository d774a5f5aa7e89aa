// Small DOM and number helpers shared by the desk's modules (FE-B and FE-C may import them
// read-only).
//
// el(tag, attrs, ...children): attrs "class", "text", "on<event>" (a function), booleans
// (true = present, false/null = absent), anything else as an attribute.
// fmtDb(x, digits), fmtSeconds(s), fmtRate(hz), cssVar(name), onThemeChange(fn).

export function el(tag, attrs = {}, ...children) {
  const node = document.createElement(tag);
  for (const [key, value] of Object.entries(attrs || {})) {
    if (value === null || value === undefined || value === false) continue;
    if (key === "class") node.className = value;
    else if (key === "text") node.textContent = value;
    else if (key.startsWith("on") && typeof value === "function") node.addEventListener(key.slice(2), value);
    else if (key === "dataset") Object.assign(node.dataset, value);
    else node.setAttribute(key, value === true ? "" : String(value));
  }
  for (const child of children.flat()) {
    if (child === null || child === undefined || child === false) continue;
    node.append(child instanceof Node ? child : String(child));
  }
  return node;
}

export function fmtDb(value, digits = 1, unit = "") {
  if (value === null || value === undefined || !Number.isFinite(value)) return "—";
  const text = value.toFixed(digits).replace("-", "−");
  return unit ? `${text} ${unit}` : text;
}

export function fmtSeconds(seconds) {
  if (!Number.isFinite(seconds)) return "—";
  if (seconds < 60) return `${seconds.toFixed(seconds < 10 ? 2 : 1)} s`;
  const m = Math.floor(seconds / 60);
  const s = seconds - 60 * m;
  return `${m}:${s.toFixed(1).padStart(4, "0")}`;
}

export function fmtClock(seconds) {
  if (!Number.isFinite(seconds)) return "0:00.0";
  const m = Math.floor(seconds / 60);
  const s = seconds - 60 * m;
  return `${m}:${s.toFixed(1).padStart(4, "0")}`;
}

export function fmtRate(hz) {
  if (!hz) return "—";
  return `${(hz / 1000).toLocaleString("en", { maximumFractionDigits: 2 })} kHz`;
}

export function cssVar(name) {
  return getComputedStyle(document.documentElement).getPropertyValue(name).trim();
}

export function onThemeChange(fn) {
  const observer = new MutationObserver(() => fn());
  observer.observe(document.documentElement, { attributes: true, attributeFilter: ["data-theme"] });
  return () => observer.disconnect();
}
