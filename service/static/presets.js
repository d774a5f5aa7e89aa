// The token owner's saved presets (GET/POST /v1/presets, PUT/DELETE /v1/presets/{id}):
// settings presets and custom loudspeaker layouts, kept on the server.
//
// One cached list for the page; a change through here re-reads it and emits
// "presets-changed" on the bus, so the settings panel and the loudspeaker editor stay in
// step. If the server has no presets endpoint (404/405) the list is empty and
// `presetsState.unavailable` says why, so the panels can say so instead of failing.

import { api, ApiError } from "./api.js";
import { bus } from "./bus.js";

export const presetsState = { items: null, unavailable: "" };
let pending = null;

function listOf(answer) {
  if (Array.isArray(answer)) return answer;
  if (answer && Array.isArray(answer.presets)) return answer.presets;
  if (answer && Array.isArray(answer.items)) return answer.items;
  return [];
}

/** Every preset of the owner (cached; `fresh` re-reads). */
export async function loadPresets({ fresh = false } = {}) {
  if (presetsState.items && !fresh) return presetsState.items;
  if (!pending) {
    pending = api("/v1/presets")
      .then((answer) => {
        presetsState.items = listOf(answer);
        presetsState.unavailable = "";
        return presetsState.items;
      })
      .catch((err) => {
        presetsState.items = [];
        presetsState.unavailable = err instanceof ApiError && (err.status === 404 || err.status === 405)
          ? "This server does not keep presets yet (no /v1/presets)."
          : `The saved presets cannot be read: ${err.message}`;
        return presetsState.items;
      })
      .finally(() => { pending = null; });
  }
  return pending;
}

/** Presets of one kind ("settings" or "layout"), by name. */
export function presetsOf(kind) {
  return (presetsState.items || []).filter((p) => p.kind === kind)
    .sort((a, b) => a.name.localeCompare(b.name));
}

export function presetById(id) {
  return (presetsState.items || []).find((p) => p.id === id) || null;
}

async function changed(result) {
  await loadPresets({ fresh: true });
  bus.emit("presets-changed", { preset: result });
  return result;
}

export async function createPreset(name, kind, body) {
  return changed(await api("/v1/presets", { method: "POST", json: { name, kind, body } }));
}

export async function updatePreset(id, name, kind, body) {
  return changed(await api(`/v1/presets/${encodeURIComponent(id)}`, { method: "PUT", json: { name, kind, body } }));
}

export async function deletePreset(id) {
  await api(`/v1/presets/${encodeURIComponent(id)}`, { method: "DELETE" });
  return changed(null);
}
