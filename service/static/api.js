// The one door to the HTTP API for the render page.
//
// Every request goes through here, so that the API token (when the server asks for one)
// is sent as "Authorization: Bearer" on each, and errors come back as ApiError with the
// problem-details text (RFC 9457) a person can read. The token lives in sessionStorage
// only: it is gone when the tab closes.

const TOKEN_KEY = "earfold.token";

export class ApiError extends Error {
  constructor(status, detail, body) {
    super(detail);
    this.status = status;
    this.body = body;
  }
}

export function getToken() {
  return sessionStorage.getItem(TOKEN_KEY) || "";
}

export function setToken(token) {
  if (token) sessionStorage.setItem(TOKEN_KEY, token);
  else sessionStorage.removeItem(TOKEN_KEY);
}

function authHeaders(extra = {}) {
  const token = getToken();
  return token ? { ...extra, Authorization: `Bearer ${token}` } : extra;
}

/** Hook the page sets to be told about a 401 (it then asks for a token). */
export const hooks = { unauthorized: () => {} };

async function problem(response, sentToken = getToken()) {
  let body = null;
  let detail = `${response.status} ${response.statusText}`;
  try {
    body = await response.json();
    if (body && body.detail) detail = body.detail;
  } catch {
    /* not JSON: keep the status line */
  }
  // A 401 to a request sent before a token was given (or changed) is stale: the page has
  // a token now, so it must not ask again; the error says so (tokenChanged) and the caller
  // may simply ask again.
  const tokenChanged = response.status === 401 && getToken() !== sentToken;
  if (response.status === 401 && !tokenChanged) hooks.unauthorized(detail);
  const error = new ApiError(response.status, detail, body);
  error.tokenChanged = tokenChanged;
  return error;
}

/** fetch() with the token; JSON answers parsed, problem details thrown as ApiError. */
export async function api(path, { method = "GET", json, body, headers = {} } = {}) {
  const sentToken = getToken();
  const init = { method, headers: authHeaders(headers) };
  if (json !== undefined) {
    init.body = JSON.stringify(json);
    init.headers["Content-Type"] = "application/json";
  } else if (body !== undefined) {
    init.body = body;
  }
  let response;
  try {
    response = await fetch(path, init);
  } catch (err) {
    throw new ApiError(0, `the server cannot be reached (${err.message})`, null);
  }
  if (!response.ok) throw await problem(response, sentToken);
  if (response.status === 204) return null;
  const type = response.headers.get("Content-Type") || "";
  return type.includes("json") ? response.json() : response;
}

/**
 * POST multipart form data with upload progress (fetch cannot report upload progress,
 * XMLHttpRequest can). `onProgress(loaded, total)`; resolves to the JSON answer. An
 * optional AbortSignal stops the upload (xhr.abort()); it then rejects with `aborted`
 * set on the ApiError.
 */
export function upload(path, form, onProgress, signal) {
  return new Promise((resolve, reject) => {
    const xhr = new XMLHttpRequest();
    if (signal) {
      if (signal.aborted) {
        const err = new ApiError(0, "the upload was stopped", null);
        err.aborted = true;
        reject(err);
        return;
      }
      signal.addEventListener("abort", () => xhr.abort(), { once: true });
    }
    xhr.open("POST", path);
    const token = getToken();
    if (token) xhr.setRequestHeader("Authorization", `Bearer ${token}`);
    xhr.responseType = "json";
    xhr.upload.onprogress = (e) => onProgress && onProgress(e.loaded, e.lengthComputable ? e.total : 0);
    xhr.onerror = () => reject(new ApiError(0, "the upload failed: the server cannot be reached", null));
    xhr.onabort = () => {
      const err = new ApiError(0, "the upload was stopped", null);
      err.aborted = true;
      reject(err);
    };
    xhr.onload = () => {
      const body = xhr.response;
      if (xhr.status >= 200 && xhr.status < 300) return resolve(body);
      const detail = (body && body.detail) || `${xhr.status} ${xhr.statusText}`;
      if (xhr.status === 401) hooks.unauthorized(detail);
      reject(new ApiError(xhr.status, detail, body));
    };
    xhr.send(form);
  });
}

/**
 * Download through fetch (so the token is sent) and save the blob under the name the
 * server suggests in Content-Disposition.
 */
export async function download(path, fallbackName) {
  const response = await api(path);
  const disposition = response.headers.get("Content-Disposition") || "";
  const match = /filename\*=UTF-8''([^;]+)|filename="?([^";]+)"?/i.exec(disposition);
  const name = match ? decodeURIComponent(match[1] || match[2]) : fallbackName;
  const blob = await response.blob();
  const url = URL.createObjectURL(blob);
  const a = document.createElement("a");
  a.href = url;
  a.download = name;
  document.body.append(a);
  a.click();
  a.remove();
  setTimeout(() => URL.revokeObjectURL(url), 60_000);
  return { name, size: blob.size };
}

/** The audio of a render as a blob URL (for the preview player). */
export async function blobUrl(path) {
  const response = await api(path);
  return URL.createObjectURL(await response.blob());
}

/** The API token's Authorization header ({} without a token), for fetch() streams. */
export function tokenHeaders(extra = {}) {
  return authHeaders(extra);
}
