"""Helpers of the desk's browser tests: stems and renders through the API, the page's
readiness, and the DOM checks shared by the desk, screenshot and page tests.

Contrast is the WCAG 2.1 contrast ratio (relative luminance from sRGB, success criterion
1.4.3: at least 4.5:1, 3:1 for large text = 24 px, or 18.66 px bold).
"""

from __future__ import annotations

import time
from pathlib import Path

import httpx

from earfold.service.tools.local_server import LocalServer

FINAL = {"done", "failed", "cancelled"}


def client(server: LocalServer) -> httpx.Client:
    return httpx.Client(base_url=server.url, timeout=60)


def post_stem(http: httpx.Client, path: Path) -> dict:
    resp = http.post("/v1/stems", files=[("file", (path.name, path.read_bytes(), "audio/wav"))])
    assert resp.status_code == 201, resp.text
    return resp.json()


def post_render(http: httpx.Client, stem_id: str, **options) -> dict:
    resp = http.post("/v1/renders", json={"stem_id": stem_id, **options})
    assert resp.status_code == 202, resp.text
    return resp.json()


def wait_final(http: httpx.Client, render_id: str, seconds: float = 120) -> dict:
    deadline = time.monotonic() + seconds
    while True:
        view = http.get(f"/v1/renders/{render_id}").json()
        if view["state"] in FINAL or time.monotonic() > deadline:
            return view
        time.sleep(0.2)


def open_desk(page, server: LocalServer, fragment: str = "") -> None:
    page.goto(f"{server.url}/{fragment}")
    page.wait_for_selector("body[data-ready]")


# Elements marked hidden that are displayed anyway (CSS display overriding the attribute).
SHOWN_HIDDEN_JS = """() => [...document.querySelectorAll('[hidden]')]
    .filter(e => getComputedStyle(e).display !== 'none')
    .map(e => e.outerHTML.slice(0, 120))"""

# Every visible element with text of its own: its colour, its effective background (the
# backgrounds of it and its ancestors composited, alpha included, over the page's) and
# whether the text is large. Disabled controls are left out (WCAG 1.4.3 exempts inactive
# user-interface components).
TEXT_COLOURS_JS = """() => {
  const parse = s => { const m = s.match(/[\\d.]+/g); if (!m) return [0, 0, 0, 0];
    const v = m.map(Number); return [v[0], v[1], v[2], v.length > 3 ? v[3] : 1]; };
  const over = (top, under) => { const a = top[3];
    return [0, 1, 2].map(i => top[i] * a + under[i] * (1 - a)).concat([1]); };
  const background = e => { const chain = [];
    for (let n = e; n; n = n.parentElement) chain.push(parse(getComputedStyle(n).backgroundColor));
    let colour = [255, 255, 255, 1];
    for (const c of chain.reverse()) if (c[3] > 0) colour = over(c, colour);
    return colour; };
  const out = [];
  for (const e of document.querySelectorAll('body *')) {
    const tag = e.tagName.toUpperCase();
    if (['SCRIPT', 'STYLE', 'CANVAS', 'SVG', 'OPTION', 'AUDIO'].includes(tag)) continue;
    if (e.closest('svg, canvas, :disabled, [aria-disabled=true], option')) continue;
    const own = [...e.childNodes].some(n => n.nodeType === 3 && n.textContent.trim());
    if (!own) continue;
    const r = e.getBoundingClientRect();
    if (!r.width || !r.height) continue;
    const st = getComputedStyle(e);
    if (st.visibility === 'hidden' || e.closest('[hidden]')) continue;
    let opacity = 1;
    for (let n = e; n; n = n.parentElement) opacity *= Number(getComputedStyle(n).opacity);
    const size = parseFloat(st.fontSize);
    const bold = Number(st.fontWeight) >= 700;
    const bg = background(e);
    const fg = parse(st.color);
    fg[3] *= opacity;
    out.push({ text: e.textContent.trim().slice(0, 40), tag: e.tagName, cls: String(e.className),
      fg: over(fg, bg).slice(0, 3), bg: bg.slice(0, 3),
      large: size >= 24 || (bold && size >= 18.66) });
  }
  return out;
}"""


def luminance(rgb) -> float:
    def channel(c: float) -> float:
        c /= 255
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4

    r, g, b = (channel(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast(fg, bg) -> float:
    a, b = sorted((luminance(fg), luminance(bg)), reverse=True)
    return (a + 0.05) / (b + 0.05)


def low_contrast(page, at_least: int = 10) -> list[tuple]:
    """Texts under the WCAG AA ratio on the page as it is drawn now (and a check that at
    least ``at_least`` texts were measured, so an empty walk cannot pass)."""
    bad = []
    items = page.evaluate(TEXT_COLOURS_JS)
    assert len(items) >= at_least, items
    for item in items:
        need = 3.0 if item["large"] else 4.5
        ratio = contrast(item["fg"], item["bg"])
        if ratio < need:
            bad.append((round(ratio, 2), item["tag"], item["cls"], item["text"]))
    return bad
