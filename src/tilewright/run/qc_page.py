"""``OUT/qc/index.html``: one page to scan every slide's QC picture, status and figures.

At a thousand slides nobody opens a thousand PNGs. The page is a grid of every slide's QC
picture (``qc/<slide_id>.png``: tissue outline, ink, kept tiles) with its status, tiles, tissue
area, warnings and any other figures its manifest row holds (stain outcomes, for example),
sortable (fewest tiles first, least tissue, slowest, ...) and filterable (failed, skipped, with
warnings, a text search). A card opens the full picture with every figure of its row.

It is one self-contained file (styles, script and the rows inline; no network), opened offline
from the output folder. It stays responsive at 10,000 slides and more: only the cards in view
exist in the page (a window of rows is drawn as the grid scrolls), so only their pictures are
loaded.

Written by ``tile_cohort`` each time the manifest is folded and at the end of the run
(:func:`write_qc_page`); :func:`qc_page_from_folder` rebuilds it from a folder's manifest.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

__all__ = ["write_qc_page", "qc_page_from_folder", "QC_PAGE", "page_rows"]

QC_PAGE = "index.html"

#: Row fields the page shows in their own places (every other field of a row is listed as a figure).
_SHOWN = ("slide_id", "status", "error", "n_tiles", "tissue_mm2", "warnings", "seconds")
#: Row fields that are bookkeeping, not figures about the slide.
_HIDDEN = ("source", "store", "kept", "bytes", "progress", "colour_profile", "source_level", "objective",
           "mpp_source")


def _plain(value):
    if value is None:
        return None
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and (math.isnan(value) or math.isinf(value)):
        return None
    if isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


def page_rows(rows) -> list[dict]:
    """What the page shows of each manifest row: the fixed fields, then the other figures."""
    out = []
    for r in rows:
        extra = {k: _plain(v) for k, v in r.items() if k not in _SHOWN and k not in _HIDDEN
                 and _plain(v) not in (None, "")}
        warnings = [w for w in str(r.get("warnings") or "").split("; ") if w]
        out.append({"id": str(r.get("slide_id")), "status": str(r.get("status") or ""),
                    "error": str(r.get("error") or ""), "tiles": int(_plain(r.get("n_tiles")) or 0),
                    "tissue": _plain(r.get("tissue_mm2")), "seconds": _plain(r.get("seconds")),
                    "warnings": warnings, "mpp": _plain(r.get("mpp_source")), "figures": extra})
    return sorted(out, key=lambda d: d["id"])


def write_qc_page(out_dir, rows, *, title: str | None = None) -> Path:
    """Write ``OUT/qc/index.html`` for the manifest rows ``rows`` (replaced atomically)."""
    from tilewright.store.journal import replace_bytes

    folder = Path(out_dir) / "qc"
    folder.mkdir(parents=True, exist_ok=True)
    data = json.dumps(page_rows(rows), ensure_ascii=False, separators=(",", ":"))
    data = data.replace("</", "<\\/").encode("utf-8")  # the rows sit inside a <script> element
    name = title or Path(out_dir).resolve().name
    head, tail = _TEMPLATE.replace("{{TITLE}}", _escape(name)).split("{{DATA}}")
    path = folder / QC_PAGE
    replace_bytes(path, b"".join((head.encode("utf-8"), data, tail.encode("utf-8"))))
    return path


def qc_page_from_folder(out_dir) -> Path:
    """Rebuild ``OUT/qc/index.html`` from the folder's manifest (with its journal)."""
    from tilewright.store.cohort import read_manifest

    return write_qc_page(out_dir, read_manifest(out_dir).to_dict("records"))


def _escape(text: str) -> str:
    return (text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace('"', "&quot;"))


_TEMPLATE = r"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>QC · {{TITLE}}</title>
<style>
:root { --ink:#1d2433; --muted:#5c6475; --line:#d9dde5; --page:#f3f1ec; --card:#fffdf8;
        --ok:#1f7a6d; --skipped:#9a6b00; --failed:#b3261e; --warn:#c75d00; --focus:#3d5a98; }
* { box-sizing: border-box; }
body { margin:0; font:14px/1.4 system-ui, sans-serif; color:var(--ink); background:var(--page); }
header { position:sticky; top:0; z-index:2; background:#26324a; color:#f6f3ea; padding:10px 18px 8px; }
header h1 { margin:0 0 6px; font-size:17px; font-weight:600; }
header .note { color:#c9cfdc; font-size:12px; margin-left:8px; font-weight:400; }
.bar { display:flex; flex-wrap:wrap; gap:8px; align-items:center; }
.chip { border:1px solid #56627e; background:#33405c; color:#f6f3ea; border-radius:14px; padding:3px 11px;
        cursor:pointer; font:inherit; }
.chip[aria-pressed="true"] { background:#f6f3ea; color:#26324a; border-color:#f6f3ea; }
.chip .n { opacity:.75; margin-left:4px; }
select, input[type=search] { font:inherit; border-radius:6px; border:1px solid #56627e; padding:3px 7px;
        background:#f6f3ea; color:#26324a; }
#shown { margin-left:auto; color:#c9cfdc; font-size:12px; }
#grid { position:relative; margin:14px 18px 40px; }
.card { position:absolute; width:var(--w); height:var(--h); background:var(--card); border:1px solid var(--line);
        border-top:5px solid var(--line); border-radius:6px; overflow:hidden; cursor:pointer; padding:0; text-align:left;
        font:inherit; color:inherit; }
.card:focus-visible { outline:3px solid var(--focus); }
.card.ok { border-top-color:var(--ok); } .card.skipped { border-top-color:var(--skipped); }
.card.failed { border-top-color:var(--failed); }
.pic { height:150px; background:#ebe7de; display:flex; align-items:center; justify-content:center; }
.pic img { max-width:100%; max-height:150px; object-fit:contain; display:block; }
.pic .none { color:var(--muted); font-size:12px; padding:8px; text-align:center; }
.meta { padding:6px 9px; }
.id { font-weight:600; white-space:nowrap; overflow:hidden; text-overflow:ellipsis; }
.line { color:var(--muted); font-size:12px; white-space:nowrap; overflow:hidden; text-overflow:ellipsis; }
.tag { display:inline-block; font-size:11px; border-radius:3px; padding:0 5px; margin-right:4px; color:#fff; }
.tag.ok { background:var(--ok); } .tag.skipped { background:var(--skipped); } .tag.failed { background:var(--failed); }
.tag.warn { background:var(--warn); }
#empty { margin:40px 18px; color:var(--muted); display:none; }
dialog { border:none; border-radius:8px; padding:0; max-width:min(1300px, 96vw); max-height:94vh; width:96vw; }
dialog::backdrop { background:rgba(20,24,34,.72); }
.full { display:flex; flex-wrap:wrap; }
.full .picture { flex:3 1 600px; background:#ebe7de; display:flex; align-items:flex-start; justify-content:center;
        max-height:90vh; overflow:auto; }
.full .picture img { max-width:100%; }
.full .facts { flex:1 1 260px; padding:14px 16px; overflow:auto; max-height:90vh; }
.facts h2 { margin:0 0 8px; font-size:16px; word-break:break-all; }
.facts table { border-collapse:collapse; width:100%; font-size:13px; }
.facts td { border-top:1px solid var(--line); padding:4px 2px; vertical-align:top; word-break:break-word; }
.facts td:first-child { color:var(--muted); width:40%; }
.facts ul { margin:4px 0 0 16px; padding:0; }
.facts .nav { margin-top:12px; display:flex; gap:6px; }
.facts button, .facts a { font:inherit; }
footer { margin:0 18px 24px; color:var(--muted); font-size:12px; }
</style></head>
<body>
<header>
  <h1>QC pictures · {{TITLE}}<span class="note">research use only, not for diagnosis</span></h1>
  <div class="bar" role="toolbar" aria-label="filters">
    <button class="chip" data-filter="all" aria-pressed="true">all<span class="n"></span></button>
    <button class="chip" data-filter="failed" aria-pressed="false">failed<span class="n"></span></button>
    <button class="chip" data-filter="skipped" aria-pressed="false">skipped<span class="n"></span></button>
    <button class="chip" data-filter="warnings" aria-pressed="false">with warnings<span class="n"></span></button>
    <label>sort <select id="sort">
      <option value="id">slide id</option><option value="tiles">fewest tiles</option>
      <option value="-tiles">most tiles</option><option value="tissue">least tissue</option>
      <option value="-warnings">most warnings</option><option value="-seconds">slowest</option>
      <option value="status">status (failed first)</option></select></label>
    <input type="search" id="search" placeholder="slide id or warning…" aria-label="search">
    <span id="shown"></span>
  </div>
</header>
<div id="grid" role="list"></div>
<p id="empty">No slide matches.</p>
<footer>Outline: tissue found; struck through: ink left out; boxes: tiles kept. Figures come from
manifest.csv. Research use only: not for diagnosis or clinical decisions.</footer>
<dialog id="viewer" aria-label="QC picture"><div class="full"><div class="picture"><img id="big" alt=""></div>
<div class="facts" id="facts"></div></div></dialog>
<script type="application/json" id="rows">{{DATA}}</script>
<script>
"use strict";
const ROWS = JSON.parse(document.getElementById("rows").textContent);
const MIN_W = 220, CARD_H = 236, GAP = 12, OVERSCAN = 2;
let CARD_W = MIN_W;
const grid = document.getElementById("grid"), viewer = document.getElementById("viewer");
const state = { filter: "all", sort: "id", text: "" };
let shown = ROWS.slice(), columns = 1, drawn = "";
const ORDER = { failed: 0, skipped: 1, ok: 2 };
const picture = r => encodeURIComponent(r.id) + ".png";
const esc = s => String(s).replace(/[&<>"']/g, c => ({"&":"&amp;","<":"&lt;",">":"&gt;","\"":"&quot;","'":"&#39;"}[c]));
const num = (v, d) => v === null || v === undefined ? "–" : Number(v).toLocaleString(undefined, {maximumFractionDigits: d});
function matches(r) {
  if (state.filter === "failed" && r.status !== "failed") return false;
  if (state.filter === "skipped" && r.status !== "skipped") return false;
  if (state.filter === "warnings" && !r.warnings.length) return false;
  if (state.text) {
    const t = state.text;
    if (!r.id.toLowerCase().includes(t) && !r.warnings.some(w => w.toLowerCase().includes(t))
        && !r.error.toLowerCase().includes(t)) return false;
  }
  return true;
}
function key(r, k) {
  switch (k) {
    case "tiles": return r.tiles;
    case "tissue": return r.tissue === null ? Infinity : r.tissue;
    case "warnings": return r.warnings.length;
    case "seconds": return r.seconds === null ? -Infinity : r.seconds;
    case "status": return ORDER[r.status] ?? 3;
    default: return r.id;
  }
}
function apply() {
  const desc = state.sort.startsWith("-"), k = desc ? state.sort.slice(1) : state.sort;
  shown = ROWS.filter(matches);
  if (k !== "id") {
    const dir = desc ? -1 : 1;  // ties: by slide id, always ascending
    shown.sort((a, b) => { const x = key(a, k), y = key(b, k);
      return x < y ? -dir : x > y ? dir : a.id < b.id ? -1 : a.id > b.id ? 1 : 0; });
  }
  document.getElementById("shown").textContent = shown.length.toLocaleString() + " of " + ROWS.length.toLocaleString() + " slides";
  document.getElementById("empty").style.display = shown.length ? "none" : "block";
  drawn = ""; layout();
}
function layout() {
  columns = Math.max(1, Math.floor((grid.clientWidth + GAP) / (MIN_W + GAP)));
  CARD_W = Math.floor((grid.clientWidth - GAP * (columns - 1)) / columns);
  grid.style.setProperty("--w", CARD_W + "px");
  grid.style.height = Math.ceil(shown.length / columns) * (CARD_H + GAP) + "px";
  draw();
}
function card(r, i) {
  const x = (i % columns) * (CARD_W + GAP), y = Math.floor(i / columns) * (CARD_H + GAP);
  const warn = r.warnings.length ? `<span class="tag warn">${r.warnings.length} warning${r.warnings.length > 1 ? "s" : ""}</span>` : "";
  const why = r.status === "ok" ? (r.warnings[0] || "") : r.error;
  return `<button class="card ${esc(r.status)}" role="listitem" data-i="${i}" style="left:${x}px;top:${y}px"
    title="${esc(r.id)}"><div class="pic"><img loading="lazy" decoding="async" alt="QC picture of ${esc(r.id)}"
    src="${picture(r)}" onerror="this.replaceWith(Object.assign(document.createElement('span'),{className:'none',textContent:'no QC picture'}))"></div>
    <div class="meta"><div class="id">${esc(r.id)}</div>
    <div class="line"><span class="tag ${esc(r.status)}">${esc(r.status)}</span>${warn}</div>
    <div class="line">${num(r.tiles, 0)} tiles · ${num(r.tissue, 2)} mm² tissue</div>
    <div class="line" title="${esc(why)}">${esc(why) || "&nbsp;"}</div></div></button>`;
}
function draw() {
  const top = grid.getBoundingClientRect().top + window.scrollY, rowH = CARD_H + GAP;
  const first = Math.max(0, Math.floor((window.scrollY - top) / rowH) - OVERSCAN);
  const last = Math.min(Math.ceil(shown.length / columns), Math.ceil((window.scrollY - top + window.innerHeight) / rowH) + OVERSCAN);
  const from = first * columns, to = Math.min(shown.length, last * columns), want = from + ":" + to + ":" + columns;
  if (want === drawn) return;
  drawn = want;
  const parts = [];
  for (let i = from; i < to; i++) parts.push(card(shown[i], i));
  grid.innerHTML = parts.join("");
}
function openCard(i) {
  const r = shown[i]; if (!r) return;
  const big = document.getElementById("big");
  big.src = picture(r); big.alt = "QC picture of " + r.id; big.dataset.i = i;
  const rowsHtml = [["status", r.status], ["tiles", num(r.tiles, 0)], ["tissue area", num(r.tissue, 3) + " mm²"],
    ["level-0 µm/px", num(r.mpp, 4)], ["seconds", num(r.seconds, 2)]]
    .concat(r.error ? [["reason", r.error]] : [])
    .concat(Object.entries(r.figures).map(([k, v]) => [k, typeof v === "number" ? num(v, 4) : v]))
    .map(([k, v]) => `<tr><td>${esc(k)}</td><td>${esc(v)}</td></tr>`).join("");
  const warns = r.warnings.length ? `<p><b>warnings</b></p><ul>${r.warnings.map(w => `<li>${esc(w)}</li>`).join("")}</ul>` : "";
  document.getElementById("facts").innerHTML = `<h2>${esc(r.id)}</h2><table>${rowsHtml}</table>${warns}
    <div class="nav"><button data-step="-1">← previous</button><button data-step="1">next →</button>
    <a href="${picture(r)}" target="_blank" rel="noopener">picture file</a><button data-close>close</button></div>`;
  if (!viewer.open) viewer.showModal();
}
document.querySelectorAll(".chip").forEach(b => b.addEventListener("click", () => {
  state.filter = b.dataset.filter;
  document.querySelectorAll(".chip").forEach(c => c.setAttribute("aria-pressed", c === b ? "true" : "false"));
  apply(); window.scrollTo(0, 0);
}));
document.getElementById("sort").addEventListener("change", e => { state.sort = e.target.value; apply(); window.scrollTo(0, 0); });
document.getElementById("search").addEventListener("input", e => { state.text = e.target.value.trim().toLowerCase(); apply(); });
grid.addEventListener("click", e => { const c = e.target.closest(".card"); if (c) openCard(Number(c.dataset.i)); });
document.getElementById("facts").addEventListener("click", e => {
  if (e.target.dataset.close !== undefined) viewer.close();
  if (e.target.dataset.step) openCard(Number(document.getElementById("big").dataset.i) + Number(e.target.dataset.step));
});
viewer.addEventListener("click", e => { if (e.target === viewer) viewer.close(); });
document.addEventListener("keydown", e => {
  if (!viewer.open) return;
  const i = Number(document.getElementById("big").dataset.i);
  if (e.key === "ArrowRight") openCard(i + 1); else if (e.key === "ArrowLeft") openCard(i - 1);
});
let pending = false;
const redraw = () => { if (!pending) { pending = true; requestAnimationFrame(() => { pending = false; draw(); }); } };
window.addEventListener("scroll", redraw, {passive: true});
window.addEventListener("resize", () => { drawn = ""; layout(); });
grid.style.setProperty("--h", CARD_H + "px");
const counts = {all: ROWS.length, failed: 0, skipped: 0, warnings: 0};
for (const r of ROWS) { if (r.status === "failed") counts.failed++; if (r.status === "skipped") counts.skipped++;
  if (r.warnings.length) counts.warnings++; }
document.querySelectorAll(".chip").forEach(b => b.querySelector(".n").textContent = counts[b.dataset.filter].toLocaleString());
apply();
window.qcReady = true;
</script>
</body></html>
"""
