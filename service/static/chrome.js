// The shared header of every earfold page, the theme switch, the hearing caution, the API
// token prompt and the toasts.
//
// Exports:
//   mountChrome({ title, current, caution })  builds the header at the top of <body> (once):
//       title    the page's own title, shown beside the name (and in document.title)
//       current  "desk" | "docs" | "" : the nav link marked aria-current
//       caution  true (default): the hearing caution in the header; a page whose player
//                shows CAUTION_TEXT beside its own volume control may pass false
//     returns { header, setTitle(text), setStatus(text) }.
//   setTitle(text)                   changes the page title in the header and the tab.
//   notify(message, kind)            a toast ("info" | "ok" | "warn" | "error"); errors
//                                    stay until closed, others fade after 6 s.
//   askToken(reason)                 opens the token prompt; resolves when a token is set
//                                    (window then gets an "earfold-token" event, so pages
//                                    can load again what the server refused before).
//   applyTheme(choice)               "system" | "light" | "dim": stores it and sets
//                                    <html data-theme>; themeChoice() reads the stored one.
//   CAUTION_TEXT                     the hearing caution, for pages that repeat it beside
//                                    their own player.
//
// The theme is applied as soon as this module is evaluated, so a page that imports it
// early does not flash the wrong palette. A 401 from api.js opens the token prompt.

import { api, hooks, getToken, setToken } from "./api.js";
import { el } from "./dom.js";

const THEME_KEY = "earfold.theme";
export const CAUTION_TEXT =
  "Hearing caution: playback starts quiet. Raise the level slowly; loud headphone listening harms hearing.";

const media = window.matchMedia ? window.matchMedia("(prefers-color-scheme: dark)") : null;

export function themeChoice() {
  const stored = localStorage.getItem(THEME_KEY);
  return stored === "light" || stored === "dim" ? stored : "system";
}

function resolvedTheme(choice) {
  if (choice === "light" || choice === "dim") return choice;
  return media && media.matches ? "dim" : "light";
}

export function applyTheme(choice) {
  if (choice === "light" || choice === "dim") localStorage.setItem(THEME_KEY, choice);
  else localStorage.removeItem(THEME_KEY);
  document.documentElement.dataset.theme = resolvedTheme(choice);
}

applyTheme(themeChoice());
if (media && media.addEventListener) {
  media.addEventListener("change", () => {
    if (themeChoice() === "system") applyTheme("system");
  });
}


let chrome = null;
let toastBox = null;

function toasts() {
  if (!toastBox) {
    toastBox = el("div", { class: "toasts", role: "status", "aria-live": "polite" });
    document.body.append(toastBox);
  }
  return toastBox;
}

export function notify(message, kind = "info") {
  const close = el("button", { type: "button", class: "btn-quiet btn", "aria-label": "close" }, "×");
  const toast = el("div", { class: `toast ${kind === "info" ? "note" : kind}` },
    el("span", {}, String(message)), " ", close);
  close.addEventListener("click", () => toast.remove());
  toasts().append(toast);
  if (kind !== "error") setTimeout(() => toast.remove(), 6000);
  return toast;
}

export function setTitle(text) {
  document.title = text ? `${text} · earfold` : "earfold";
  if (chrome) chrome.querySelector(".page-title").textContent = text || "";
}

let tokenDialog = null;
let tokenWaiters = [];

export function askToken(reason = "") {
  if (!tokenDialog) {
    const input = el("input", { id: "token-input", type: "password", autocomplete: "off", required: true });
    const message = el("p", { class: "hint", id: "token-message", role: "alert" });
    const form = el("form", { method: "dialog" },
      el("h2", { text: "API token" }),
      el("p", { class: "hint", text:
        "This server asks for an API token. It is kept in this browser tab only (session storage) and sent with each request." }),
      el("div", { class: "field" }, el("label", { for: "token-input", text: "Token" }), input),
      message,
      el("div", { class: "toolbar" }, el("button", { type: "submit", class: "btn btn-primary" }, "Use this token")));
    tokenDialog = el("dialog", { class: "token-dialog", "aria-labelledby": "token-title" }, form);
    form.querySelector("h2").id = "token-title";
    form.addEventListener("submit", async (event) => {
      event.preventDefault();
      const value = input.value.trim();
      if (!value) return;
      // Tried on its own before it is kept, so other requests never carry a wrong token.
      try {
        const probe = await fetch("/v1/renders?limit=1", { headers: { Authorization: `Bearer ${value}` } });
        if (probe.status === 401) {
          message.textContent = "The server did not accept this token.";
          return;
        }
      } catch (err) {
        message.textContent = `The server cannot be reached: ${err.message}`;
        return;
      }
      setToken(value);
      tokenDialog.close();
      window.dispatchEvent(new CustomEvent("earfold-token", { detail: {} }));
      const waiters = tokenWaiters;
      tokenWaiters = [];
      waiters.forEach((fn) => fn(value));
    });
    document.body.append(tokenDialog);
  }
  if (!tokenDialog.open) {
    tokenDialog.querySelector("#token-message").textContent = reason || "";
    tokenDialog.showModal();
  }
  return new Promise((resolve) => tokenWaiters.push(resolve));
}

hooks.unauthorized = (detail) => {
  askToken(getToken() ? `The server refused the token: ${detail}` : "");
};

export function mountChrome({ title = "", current = "", caution = true } = {}) {
  if (chrome) {
    setTitle(title);
    return chrome.api;
  }
  const themeSelect = el("select", { id: "theme-choice", "aria-label": "Theme" },
    el("option", { value: "system" }, "theme: system"),
    el("option", { value: "light" }, "theme: light"),
    el("option", { value: "dim" }, "theme: dim"));
  themeSelect.value = themeChoice();
  themeSelect.addEventListener("change", () => applyTheme(themeSelect.value));
  const link = (href, text, key) =>
    el("a", { href, "aria-current": current === key ? "page" : null }, text);
  const status = el("span", { class: "status", id: "server-status", "aria-live": "polite" }, "connecting…");
  const forget = el("button", { type: "button", class: "btn btn-quiet btn-small", id: "token-forget", hidden: true },
    "forget token");
  forget.addEventListener("click", () => {
    setToken("");
    forget.hidden = true;
    notify("The API token is forgotten in this tab.", "info");
  });
  chrome = el("header", { class: "chrome", role: "banner" },
    el("a", { class: "brand", href: "/" }, "earfold"),
    el("span", { class: "page-title" }),
    el("nav", { "aria-label": "Pages" }, link("/", "Desk", "desk"), link("/docs", "API docs", "docs")),
    el("span", { class: "spacer" }),
    caution ? el("p", { class: "caution", role: "note", id: "hearing-caution", style: "margin:0" }, CAUTION_TEXT) : null,
    status, forget, themeSelect);
  const skip = el("a", { class: "skip", href: "#main" }, "Skip to the page");
  document.body.prepend(skip, chrome);
  chrome.api = {
    header: chrome,
    setTitle,
    setStatus: (text) => { status.textContent = text; },
  };
  setTitle(title);
  api("/v1/health").then((health) => {
    status.textContent = `earfold ${health.version || ""}`.trim();
    forget.hidden = !getToken();
    if (health.auth && !getToken()) askToken();
  }).catch((err) => {
    status.textContent = "server unreachable";
    notify(`The server cannot be reached: ${err.message}`, "error");
  });
  return chrome.api;
}
