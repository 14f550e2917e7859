// hystd review page: runs, loops, comparison, trends, the live sweep and
// starting or aborting a recipe. No library and no network beyond this
// daemon; every plot is drawn here as SVG.
"use strict";

const SVGNS = "http://www.w3.org/2000/svg";
// Trace colours, our own pick: neighbours differ in hue and in lightness so
// that they stay apart for readers with red-green or blue-yellow colour
// vision deficiency and in greyscale print (dark blue, light orange, mid
// bluish green, dark reddish purple, light sky blue, dark brown).
const COLOURS = ["#174f8c", "#e69a2e", "#23907a", "#8e2d5c", "#7fb8e0", "#5a3a12"];
const MARK = "#c01c28";

const state = {
  info: { cgs: { oe_per_a_m: NaN, g_per_t: NaN, mgoe_per_j_m3: NaN }, can_submit: false },
  key: sessionStorage.getItem("hystd.key") || "",
  run: null,        // selected run detail
  loopN: 0,
  loop: null,       // selected loop with points
  compare: [],      // [{run_id, n, loop}]
  live: { run: "", loops: {}, count: 0, state: "", step: "" },
  figureNames: new Set(),
};

// ---------- small helpers ----------

function $(sel) { return document.querySelector(sel); }
function el(tag, attrs, ...kids) {
  const e = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (k === "class") e.className = v; else if (k === "text") e.textContent = v; else e.setAttribute(k, v);
  }
  for (const k of kids) e.append(k);
  return e;
}
function sv(tag, attrs) {
  const e = document.createElementNS(SVGNS, tag);
  for (const [k, v] of Object.entries(attrs || {})) e.setAttribute(k, v);
  return e;
}
function fmt(v, digits) {
  if (v === null || v === undefined || !isFinite(v)) return "—";
  if (v === 0) return "0";
  const a = Math.abs(v);
  if (a >= 1e6 || a < 1e-3) return v.toExponential((digits || 4) - 1).replace("-", "−");
  return Number(v.toPrecision(digits || 5)).toString().replace("-", "−");
}
function when(s) { return s ? s.replace("T", " ").replace(/\.\d+/, "").replace("Z", " UTC") : "—"; }

async function api(path, opts) {
  opts = opts || {};
  const headers = Object.assign({}, opts.headers || {});
  if (state.key) headers["Authorization"] = "Bearer " + state.key;
  const resp = await fetch(path, Object.assign({}, opts, { headers }));
  let body = null;
  try { body = await resp.json(); } catch (e) { body = null; }
  if (!resp.ok) {
    const msg = body && body.error ? body.error : resp.status + " " + resp.statusText;
    const err = new Error(msg);
    err.status = resp.status;
    throw err;
  }
  return body;
}

// ---------- axes ----------

function niceStep(span, target) {
  const raw = span / target;
  const mag = Math.pow(10, Math.floor(Math.log10(raw)));
  for (const m of [1, 2, 5, 10]) if (m * mag >= raw) return m * mag;
  return 10 * mag;
}
function niceAxis(lo, hi, target) {
  if (!(hi > lo)) { hi = lo + 1; }
  const step = niceStep(hi - lo, target);
  return { lo: Math.floor(lo / step + 1e-9) * step, hi: Math.ceil(hi / step - 1e-9) * step, step };
}
function tickLabel(v, step) {
  const dec = step < 1 ? Math.ceil(-Math.log10(step) - 1e-9) : 0;
  return (Math.abs(v) < step * 1e-9 ? 0 : v).toFixed(dec).replace("-", "−");
}

// scaleFor picks display units for H and the ordinate.
function scaleFor(units, hmax, ymax) {
  const c = state.info.cgs;
  if (units === "cgs") {
    const s = { hMul: c.oe_per_a_m, hUnit: "Oe", yMul: c.g_per_t, yUnit: "G", eMul: c.mgoe_per_j_m3, eUnit: "MGOe" };
    if (hmax * s.hMul >= 1e4) { s.hMul /= 1e3; s.hUnit = "kOe"; }
    if (ymax * s.yMul >= 1e4) { s.yMul /= 1e3; s.yUnit = "kG"; }
    return s;
  }
  const s = { hMul: 1, hUnit: "A/m", yMul: 1, yUnit: "T", eMul: 1e-3, eUnit: "kJ/m³" };
  if (hmax >= 1e6) { s.hMul = 1e-6; s.hUnit = "MA/m"; } else if (hmax >= 1e3) { s.hMul = 1e-3; s.hUnit = "kA/m"; }
  if (ymax < 0.1) { s.yMul = 1e3; s.yUnit = "mT"; }
  return s;
}

// ---------- the plot ----------

// Plot draws series of (x, y) in display units into a container, with
// drag-to-zoom. spec: {series: [{label, colour, xs, ys, dashed, key, width}],
// xlabel, ylabel, xlim?, ylim?, markers: [{x, y, label, cls}], hlines:
// [{y, label}], points: [{x, y, u, cls, title}], xticks?: fn(axis) → [{v,label}]}
class Plot {
  constructor(container) {
    this.box = container;
    this.zoom = null;
    this.spec = null;
  }
  set(spec, keepZoom) {
    this.spec = spec;
    if (!keepZoom) this.zoom = null;
    this.draw();
  }
  resetZoom() { this.zoom = null; this.draw(); }
  extent() {
    const s = this.spec;
    let xlo = Infinity, xhi = -Infinity, ylo = Infinity, yhi = -Infinity;
    const take = (x, y) => {
      if (!isFinite(x) || !isFinite(y)) return;
      if (x < xlo) xlo = x; if (x > xhi) xhi = x; if (y < ylo) ylo = y; if (y > yhi) yhi = y;
    };
    for (const se of s.series) for (let i = 0; i < se.xs.length; i++) take(se.xs[i], se.ys[i]);
    for (const p of s.points || []) { take(p.x, p.y - (p.u || 0)); take(p.x, p.y + (p.u || 0)); }
    for (const h of s.hlines || []) if (isFinite(h.y)) { ylo = Math.min(ylo, h.y); yhi = Math.max(yhi, h.y); }
    if (s.symmetric) {
      const xm = Math.max(Math.abs(xlo), Math.abs(xhi)), ym = Math.max(Math.abs(ylo), Math.abs(yhi));
      xlo = -xm; xhi = xm; ylo = -ym; yhi = ym;
    }
    if (s.xlim) [xlo, xhi] = s.xlim;
    if (s.ylim) [ylo, yhi] = s.ylim;
    if (!isFinite(xlo)) return null;
    if (xhi === xlo) { xlo -= 1; xhi += 1; }
    if (yhi === ylo) { ylo -= 1; yhi += 1; }
    return { xlo, xhi, ylo, yhi };
  }
  draw() {
    const s = this.spec;
    this.box.textContent = "";
    if (!s) return;
    const ext = this.zoom || this.extent();
    if (!ext) { this.box.append(el("div", { class: "empty", text: s.empty || "nothing to draw" })); return; }
    const W = 900, H = 560, x0 = 80, y0 = 16, x1 = W - 18, y1 = H - 54;
    let xa, ya;
    if (this.zoom) {
      xa = { lo: ext.xlo, hi: ext.xhi, step: niceStep(ext.xhi - ext.xlo, 8) };
      ya = { lo: ext.ylo, hi: ext.yhi, step: niceStep(ext.yhi - ext.ylo, 7) };
    } else {
      xa = s.xfixed ? { lo: ext.xlo, hi: ext.xhi, step: niceStep(ext.xhi - ext.xlo, 6) } : niceAxis(ext.xlo, ext.xhi, 8);
      ya = niceAxis(ext.ylo, ext.yhi, 7);
    }
    const px = (x) => x0 + (x - xa.lo) / (xa.hi - xa.lo) * (x1 - x0);
    const py = (y) => y1 - (y - ya.lo) / (ya.hi - ya.lo) * (y1 - y0);
    this.map = { px, py, xa, ya, x0, x1, y0, y1, W, H };
    const svg = sv("svg", { viewBox: `0 0 ${W} ${H}`, "font-size": "13", "font-family": "DejaVu Sans, Helvetica, Arial, sans-serif",
      "data-xlo": xa.lo, "data-xhi": xa.hi, "data-ylo": ya.lo, "data-yhi": ya.hi, "data-area": [x0, x1, y0, y1].join(",") });
    svg.append(sv("rect", { x: 0, y: 0, width: W, height: H, fill: "#fff" }));
    const grid = sv("g", { stroke: "#e2e5df" });
    const labels = sv("g", { fill: "#22262a" });
    const xt = s.xticks ? s.xticks(xa) : null;
    const xs = xt || [];
    if (!xt) for (let v = Math.ceil(xa.lo / xa.step - 1e-9) * xa.step; v <= xa.hi + xa.step * 1e-9; v += xa.step) xs.push({ v, label: tickLabel(v, xa.step) });
    for (const t of xs) {
      grid.append(sv("line", { x1: px(t.v), x2: px(t.v), y1: y0, y2: y1 }));
      const tx = sv("text", { x: px(t.v), y: y1 + 17, "text-anchor": "middle", class: "xtick" });
      tx.textContent = t.label; labels.append(tx);
    }
    for (let v = Math.ceil(ya.lo / ya.step - 1e-9) * ya.step; v <= ya.hi + ya.step * 1e-9; v += ya.step) {
      grid.append(sv("line", { x1: x0, x2: x1, y1: py(v), y2: py(v) }));
      const tx = sv("text", { x: x0 - 6, y: py(v) + 4, "text-anchor": "end", class: "ytick" });
      tx.textContent = tickLabel(v, ya.step); labels.append(tx);
    }
    svg.append(grid);
    const axes = sv("g", { stroke: "#6a7074", "stroke-width": "1.2" });
    if (xa.lo < 0 && xa.hi > 0 && !s.xfixed) axes.append(sv("line", { x1: px(0), x2: px(0), y1: y0, y2: y1 }));
    if (ya.lo < 0 && ya.hi > 0) axes.append(sv("line", { x1: x0, x2: x1, y1: py(0), y2: py(0) }));
    axes.append(sv("rect", { x: x0, y: y0, width: x1 - x0, height: y1 - y0, fill: "none" }));
    svg.append(axes);
    const xl = sv("text", { x: (x0 + x1) / 2, y: H - 14, "text-anchor": "middle", class: "xlabel" });
    xl.textContent = s.xlabel; labels.append(xl);
    const yl = sv("text", { transform: `translate(18 ${(y0 + y1) / 2}) rotate(-90)`, "text-anchor": "middle", class: "ylabel" });
    yl.textContent = s.ylabel; labels.append(yl);
    svg.append(labels);

    const clipId = "clip" + Math.random().toString(36).slice(2);
    const clip = sv("clipPath", { id: clipId });
    clip.append(sv("rect", { x: x0, y: y0, width: x1 - x0, height: y1 - y0 }));
    svg.append(clip);
    const data = sv("g", { "clip-path": `url(#${clipId})`, fill: "none", "stroke-linejoin": "round" });
    for (const h of s.hlines || []) {
      if (!isFinite(h.y)) continue;
      data.append(sv("line", { x1: x0, x2: x1, y1: py(h.y), y2: py(h.y), stroke: MARK, "stroke-dasharray": "7 4", class: "limit" }));
    }
    for (const se of s.series) {
      // One polyline per series; a non-finite value breaks it into pieces.
      let pts = [], n = 0;
      const flush = () => {
        if (pts.length) {
          data.append(sv("polyline", { points: pts.join(" "), stroke: se.colour, "stroke-width": se.width || 1.6,
            "stroke-dasharray": se.dashed ? "6 4" : "none", class: "trace" + (se.cls ? " " + se.cls : ""),
            "data-key": se.key || "", "data-count": pts.length }));
        }
        pts = [];
      };
      for (let i = 0; i < se.xs.length; i++) {
        const x = se.xs[i], y = se.ys[i];
        if (!isFinite(x) || !isFinite(y)) { flush(); continue; }
        pts.push(px(x).toFixed(2) + "," + py(y).toFixed(2)); n++;
      }
      flush();
    }
    for (const p of s.points || []) {
      if (isFinite(p.u) && p.u > 0) data.append(sv("line", { x1: px(p.x), x2: px(p.x), y1: py(p.y - p.u), y2: py(p.y + p.u), stroke: "#6a7074", class: "ebar" }));
      const c = sv("circle", { cx: px(p.x), cy: py(p.y), r: 4.5, fill: p.cls === "out" ? MARK : COLOURS[0], class: "trend-pt " + (p.cls || "") });
      if (p.title) { const t = sv("title"); t.textContent = p.title; c.append(t); }
      data.append(c);
    }
    svg.append(data);
    for (const m of s.markers || []) {
      if (m.curve) {
        svg.append(sv("polyline", { points: m.curve.filter(q => isFinite(q[1])).map(q => px(q[0]).toFixed(1) + "," + py(q[1]).toFixed(1)).join(" "),
          stroke: MARK, fill: "none", "stroke-dasharray": "2 3", "clip-path": `url(#${clipId})` }));
      }
      svg.append(sv("circle", { cx: px(m.x), cy: py(m.y), r: 6, stroke: MARK, "stroke-width": 2, fill: "none", class: m.cls || "marker" }));
      const t = sv("text", { x: px(m.x) + 12, y: py(m.y) - 14, fill: MARK, class: "marker-label" });
      t.textContent = m.label; svg.append(t);
    }
    // Legend.
    let ly = y0 + 18;
    for (const se of s.series) {
      if (!se.label) continue;
      svg.append(sv("line", { x1: x0 + 10, x2: x0 + 32, y1: ly - 4, y2: ly - 4, stroke: se.colour, "stroke-width": 3, "stroke-dasharray": se.dashed ? "6 4" : "none" }));
      const t = sv("text", { x: x0 + 38, y: ly, fill: "#22262a", class: "legend" }); t.textContent = se.label; svg.append(t);
      ly += 17;
    }
    this.attachZoom(svg);
    this.box.append(svg);
  }
  attachZoom(svg) {
    const m = this.map;
    let start = null, rect = null;
    const toSvg = (ev) => {
      const r = svg.getBoundingClientRect();
      return [(ev.clientX - r.left) / r.width * m.W, (ev.clientY - r.top) / r.height * m.H];
    };
    svg.addEventListener("mousedown", (ev) => {
      const p = toSvg(ev);
      if (p[0] < m.x0 || p[0] > m.x1 || p[1] < m.y0 || p[1] > m.y1) return;
      start = p;
      rect = sv("rect", { x: p[0], y: p[1], width: 0, height: 0, fill: "#1b6f7a22", stroke: "#1b6f7a", class: "zoom-box" });
      svg.append(rect);
      ev.preventDefault();
    });
    svg.addEventListener("mousemove", (ev) => {
      if (!start) return;
      const p = toSvg(ev);
      rect.setAttribute("x", Math.min(p[0], start[0])); rect.setAttribute("y", Math.min(p[1], start[1]));
      rect.setAttribute("width", Math.abs(p[0] - start[0])); rect.setAttribute("height", Math.abs(p[1] - start[1]));
    });
    const end = (ev) => {
      if (!start) return;
      const p = toSvg(ev), a = start;
      start = null;
      if (Math.abs(p[0] - a[0]) < 6 || Math.abs(p[1] - a[1]) < 6) { rect.remove(); return; }
      const ix = (x) => m.xa.lo + (x - m.x0) / (m.x1 - m.x0) * (m.xa.hi - m.xa.lo);
      const iy = (y) => m.ya.lo + (m.y1 - y) / (m.y1 - m.y0) * (m.ya.hi - m.ya.lo);
      this.zoom = { xlo: ix(Math.min(a[0], p[0])), xhi: ix(Math.max(a[0], p[0])), ylo: iy(Math.max(a[1], p[1])), yhi: iy(Math.min(a[1], p[1])) };
      this.draw();
    };
    svg.addEventListener("mouseup", end);
    svg.addEventListener("mouseleave", (ev) => { if (start) end(ev); });
    svg.addEventListener("dblclick", () => this.resetZoom());
  }
}

// ---------- loops as plot series ----------

function segValue(bar) { return bar.querySelector("button.on").dataset.v; }

// loopSpec turns loops into a plot spec for ordinate "B" or "J", units
// "si" or "cgs", and q2 (second quadrant with the (BH)max point).
function loopSpec(loops, ordinate, units, q2) {
  let hmax = 0, ymax = 0;
  for (const l of loops) {
    const p = l.points;
    for (let i = 0; i < p.h_a_m.length; i++) {
      const h = p.h_a_m[i], y = ordinate === "J" || q2 ? Math.max(Math.abs(p.j_t[i] ?? 0), Math.abs(p.b_t[i] ?? 0)) : Math.abs(p.b_t[i] ?? 0);
      if (isFinite(h) && Math.abs(h) > hmax) hmax = Math.abs(h);
      if (isFinite(y) && y > ymax) ymax = y;
    }
  }
  const sc = scaleFor(units, hmax, ymax);
  const spec = { series: [], markers: [], xlabel: `H (${sc.hUnit})`, ylabel: "", empty: "this loop holds no points" };
  const num = (v) => (v === null || v === undefined) ? NaN : v;
  loops.forEach((l, i) => {
    const p = l.points, col = COLOURS[i % COLOURS.length], key = `${l.run_id}#${l.n}`;
    const name = `${l.run_id.replace(/^.*-(\d{8}T\d{4})\d*Z-.*$/, "$1")} #${l.n} ${l.kind} ±${fmt(l.amplitude, 4)} ${l.amplitude_unit}`;
    const xs = p.h_a_m.map(v => num(v) * sc.hMul);
    if (q2) {
      const keep = (arr) => arr.map((v, k) => (num(p.h_a_m[k]) <= 0 && num(v) >= 0) ? num(v) * sc.yMul : NaN);
      spec.series.push({ label: `${name} B`, colour: col, xs, ys: keep(p.b_t), key, cls: "b" });
      spec.series.push({ label: `${name} J`, colour: col, xs, ys: keep(p.j_t), key, dashed: true, cls: "j" });
    } else {
      const src = ordinate === "J" ? p.j_t : p.b_t;
      spec.series.push({ label: name, colour: col, xs, ys: src.map(v => num(v) * sc.yMul), key });
    }
  });
  if (q2) {
    let best = null;
    for (const l of loops) {
      const p = l.points;
      for (let k = 0; k < p.h_a_m.length; k++) {
        const h = num(p.h_a_m[k]), b = num(p.b_t[k]);
        if (h < 0 && b > 0 && (!best || -h * b > best.e)) best = { h, b, e: -h * b };
      }
    }
    let hlo = 0, yhi = 0;
    for (const se of spec.series) for (let k = 0; k < se.xs.length; k++) if (isFinite(se.ys[k])) { hlo = Math.min(hlo, se.xs[k]); yhi = Math.max(yhi, se.ys[k]); }
    spec.xlim = [hlo < 0 ? hlo : -1, 0];
    spec.ylim = [0, yhi > 0 ? yhi : 1];
    spec.ylabel = `B solid, J dashed (${sc.yUnit})`;
    if (best) {
      const curve = [];
      for (let k = 1; k <= 60; k++) { const hh = spec.xlim[0] * k / 60; curve.push([hh, best.e / (-hh / sc.hMul) * sc.yMul]); }
      spec.markers.push({ x: best.h * sc.hMul, y: best.b * sc.yMul, cls: "bhmax",
        label: `(BH)max ${fmt(best.e * sc.eMul, 3)} ${sc.eUnit} at B ${fmt(best.b * sc.yMul, 3)} ${sc.yUnit}`, curve });
    }
  } else {
    spec.ylabel = `${ordinate} (${sc.yUnit})`;
    spec.symmetric = true;
  }
  return spec;
}

// ---------- runs list ----------

function filterQuery() {
  const q = new URLSearchParams();
  for (const id of ["fixture", "specimen", "material", "state", "since", "until"]) {
    const v = $("#f-" + id).value.trim();
    if (v) q.set(id, v);
  }
  q.set("limit", "200");
  return q.toString();
}

async function loadRuns() {
  const msg = $("#runs-msg");
  try {
    const data = await api("/api/v1/runs?" + filterQuery());
    const list = $("#runs-list");
    list.textContent = "";
    for (const r of data.runs) {
      const li = el("li", { "data-run-id": r.id, "data-state": r.state, "data-verdict": r.verdict || "" },
        el("span", { class: "state state-" + r.state, text: r.state }),
        r.verdict ? el("span", { class: "verdict verdict-" + r.verdict, text: r.verdict, title: "worst verdict against grade " + (r.grade || "") }) : "",
        el("div", { class: "r-recipe", text: r.recipe }),
        el("div", { class: "r-meta", text: `${r.specimen} · ${r.material} · ${r.fixture}` + (r.grade ? ` · grade ${r.grade}` : "") }),
        el("div", { class: "r-id", text: r.id }),
        el("div", { class: "r-meta", text: when(r.started || r.queued) }));
      if (state.run && state.run.run.id === r.id) li.classList.add("sel");
      li.addEventListener("click", () => selectRun(r.id));
      list.append(li);
    }
    msg.textContent = data.runs.length ? `${data.runs.length} run(s), newest first` : "no run matches";
    msg.className = "muted";
  } catch (e) {
    msg.textContent = e.message; msg.className = "msg-err";
  }
}

// Loops the forwarder quarantined, with the server's reason.
async function loadOutbox() {
  try {
    const data = await api("/api/v1/outbox");
    const list = $("#outbox-list");
    list.textContent = "";
    for (const q of data.quarantined || []) {
      list.append(el("li", { "data-run-id": q.run_id },
        el("div", { class: "r-id", text: `${q.run_id} · loop ${q.loop}` }),
        el("div", { class: "r-meta", text: q.reason })));
    }
    $("#outbox-box").hidden = !(data.quarantined && data.quarantined.length);
  } catch (e) { /* an older daemon without the endpoint: nothing to show */ }
}

// ---------- one run ----------

const loopPlot = { plot: null };

// loopPending marks the loop view as not (yet) showing a loaded loop: the
// figures, the download links and "Add to compare" are withdrawn until the
// new loop is in, so that none of them belongs to the previous run. The
// body's data-loop ("RUN#N", set by loopLoaded) says which loop is shown;
// tests wait on it.
function loopPending() {
  state.loop = null;
  delete document.body.dataset.loop;
  $("#compare-add").disabled = true;
  for (const id of ["#dl-svg", "#dl-png"]) $(id).removeAttribute("href");
  fillTables(null);
}

function loopLoaded() {
  $("#compare-add").disabled = false;
  document.body.dataset.loop = `${state.loop.run_id}#${state.loop.n}`;
}

let selectSeq = 0; // the latest selection; answers to older ones are dropped

// selectRun shows run id at revision rev (absent: the latest).
async function selectRun(id, rev) {
  showView("loop");
  const seq = ++selectSeq;
  loopPending();
  let run;
  try {
    run = await api("/api/v1/runs/" + encodeURIComponent(id) + (rev ? "?revision=" + rev : ""));
  } catch (e) {
    if (seq === selectSeq) $("#run-head").textContent = e.message;
    return;
  }
  if (seq !== selectSeq) return;
  state.run = run;
  for (const li of document.querySelectorAll("#runs-list li")) li.classList.toggle("sel", li.dataset.runId === id);
  const r = state.run.run;
  if (!$("#s-fixture").value) $("#s-fixture").value = r.fixture;
  const head = $("#run-head");
  head.textContent = "";
  const meta = el("div", { class: "meta" });
  const item = (k, v) => meta.append(el("span", {}, el("span", { class: "label", text: k + " " }), v));
  item("recipe", r.recipe); item("fixture", r.fixture); item("specimen", r.specimen); item("material", r.material);
  item("started", when(r.started)); item("ended", when(r.ended));
  if (r.operator) item("started by", r.operator);
  if (state.run.aborted_by) item("aborted by", state.run.aborted_by);
  if (r.reason) item("reason", r.reason);
  const st = el("span", { class: "state state-" + r.state, text: r.state, id: "run-state" });
  head.append(el("h2", { text: r.id }, " ", st), meta);
  // A re-processed run: every revision, the one shown marked; pick another.
  const revs = r.revisions || [];
  document.body.dataset.revision = `${r.id}@${r.revision}`;
  if (revs.length > 1) {
    const ul = el("ul", { class: "revisions", id: "run-revisions" });
    for (const v of revs) {
      const what = v.n === 1 ? "as recorded" : v.change.split("\n").join("; ");
      const b = el("button", { "data-rev": v.n, text: `revision ${v.n}${v.n === revs.length ? " (latest)" : ""}` });
      b.classList.toggle("on", v.n === r.revision);
      b.addEventListener("click", () => selectRun(r.id, v.n));
      ul.append(el("li", {}, b, " ", el("span", { class: "muted", text: `${when(v.at)} by ${v.by || "—"}: ${what}` })));
    }
    head.append(el("div", { class: "label", text: `showing revision ${r.revision} of ${revs.length}` }), ul);
  }
  // The calibration records the run's processing used (none: the
  // instrument profiles' scale factors as configured).
  const cals = state.run.calibrations || [];
  const cl = el("ul", { class: "cals", id: "run-calibrations" });
  for (const c of cals) cl.append(el("li", { text: "calibration " + c }));
  if (!cals.length) cl.append(el("li", { class: "muted", text: "no calibration record used" }));
  head.append(cl);
  if ((state.run.flags || []).length) {
    const fl = el("ul", { class: "flags", id: "run-flags" });
    for (const f of state.run.flags) fl.append(el("li", { text: f }));
    head.append(fl);
  }
  if (r.state === "queued" || r.state === "running") {
    const b = el("button", { class: "danger", id: "run-abort" , text: "Abort run" });
    const m = el("span", { class: "muted", id: "run-abort-msg" });
    armAbort(b, m, () => r.id);
    head.append(el("div", { class: "toolbar" }, b, m));
  }
  const picker = $("#loop-picker");
  picker.textContent = "";
  for (const l of state.run.loops) {
    const b = el("button", { "data-n": l.n, text: `#${l.n} ${l.kind} ±${fmt(l.amplitude, 4)} ${l.amplitude_unit}` });
    b.addEventListener("click", () => selectLoop(l.n));
    picker.append(b);
  }
  const ev = $("#events");
  ev.textContent = "";
  for (const e of state.run.events) ev.append(el("li", { class: e.level, text: `${when(e.at)}  ${e.text}` }));
  if (state.run.loops.length) await selectLoop(state.run.loops[0].n, seq);
  else { loopPlot.plot.set({ series: [], empty: "no loop stored for this run (yet)" }); document.body.dataset.loop = `${r.id}#none`; }
}

async function selectLoop(n, seq) {
  if (seq === undefined) seq = ++selectSeq;
  const r = state.run.run;
  loopPending();
  let data;
  try {
    data = await api(`/api/v1/runs/${encodeURIComponent(r.id)}/loops/${n}?max_points=200000&revision=${r.revision}`);
  } catch (e) {
    if (seq === selectSeq) $("#loop-plot").textContent = e.message;
    return;
  }
  if (seq !== selectSeq) return;
  state.loop = data.loop; state.loopN = n;
  for (const b of document.querySelectorAll("#loop-picker button")) b.classList.toggle("on", +b.dataset.n === n);
  for (const f of state.loop.figures) state.figureNames.add(f.name);
  refreshFigureList();
  drawLoop(false);
  fillTables(state.loop);
  loopLoaded();
}

function drawLoop(keepZoom) {
  if (!state.loop) return;
  const bar = $("#loop-toolbar");
  const spec = loopSpec([state.loop], segValue(bar.querySelector('[data-name="ordinate"]')),
    segValue(bar.querySelector('[data-name="units"]')), $("#q2-toggle").checked);
  if (state.loop.points_stride > 1) spec.series[0].label += ` (every ${state.loop.points_stride}th of ${state.loop.n_points} points)`;
  loopPlot.plot.set(spec, keepZoom);
  const q = new URLSearchParams({ y: segValue(bar.querySelector('[data-name="ordinate"]')), units: segValue(bar.querySelector('[data-name="units"]')) });
  if ($("#q2-toggle").checked) q.set("quadrant", "2");
  const base = `/api/v1/runs/${encodeURIComponent(state.loop.run_id)}/loops/${state.loop.n}/plot?revision=${state.run.run.revision}&`;
  $("#dl-svg").href = base + q + "&format=svg";
  $("#dl-png").href = base + q + "&format=png";
}

// cgsOf writes a figure and its U in the CGS unit, rounded by roundU.
function cgsOf(v, u, unit) {
  const c = state.info.cgs;
  if (!isFinite(v)) return "";
  const k = { "A/m": [c.oe_per_a_m, "Oe"], "T": [c.g_per_t, "G"], "J/m3": [c.mgoe_per_j_m3, "MGOe"], "J/m³": [c.mgoe_per_j_m3, "MGOe"] }[unit];
  if (!k) return "";
  return withU(v * k[0], u === null || u === undefined ? u : u * k[0]) + " " + k[1];
}

function fillTables(loop) {
  const fb = $("#figures tbody"), cb = $("#corrections tbody");
  fb.textContent = ""; cb.textContent = "";
  if (!loop) return;
  for (const f of loop.flags || []) fb.append(el("tr", { class: "flag" }, el("td", { colspan: "6", text: f })));
  for (const f of loop.figures) {
    const how = f.note ? el("details", { class: "how" }, el("summary", { text: "how" }), el("p", { text: f.note })) : "";
    fb.append(el("tr", { "data-figure": f.name }, el("td", { text: f.name }),
      el("td", { class: "num vu", text: withU(f.value, f.u) + (f.unit ? " " + f.unit : "") }),
      el("td", { class: "num cgs-col", text: cgsOf(f.value, f.u, f.unit) }), el("td", {}, how)));
  }
  fillVerdicts(loop);
  for (const c of loop.corrections) {
    cb.append(el("tr", {}, el("td", { text: c.name }), el("td", { class: "num", text: fmt(c.size, 4) }), el("td", { text: c.unit }), el("td", { class: "muted", text: c.note })));
  }
  if (!loop.corrections.length) cb.append(el("tr", {}, el("td", { text: "none recorded" })));
}

// roundU is the page's one rounding rule for a reported value and its
// expanded uncertainty, GUM (JCGM 100:2008) 7.2.6 as in Go's
// calib/units.Rounded: U to two significant digits, the value to the same
// decimal place (9.96 → 10, 99.6 → 100). U exactly 0: the value to 6
// significant digits and "0"; U not evaluated (null, NaN, negative): the
// value to 5 and null. Returns [value, U] as text ("−" for minus).
function roundU(v, u) {
  if (v === null || v === undefined || !isFinite(v)) return ["—", null];
  if (u === 0) return [sig(v, 6), "0"];
  if (u === null || u === undefined || !isFinite(u) || u < 0) return [sig(v, 5), null];
  let e = Math.floor(Math.log10(u)) - 1; // decimal exponent of U's second digit
  if (roundAt(u, e) >= Math.pow(10, e + 2)) e += 1;
  const d = Math.max(-e, 0);
  const txt = (x) => { const r = roundAt(x, e); return (r === 0 ? 0 : r).toFixed(d).replace("-", "−"); };
  return [txt(v), txt(u)];
}
// roundAt rounds x to a multiple of 10^e (dividing by 10^−e for e < 0, so
// that 0.0028 stays the nearest double to 0.0028).
function roundAt(x, e) {
  if (e < 0) { const p = Math.pow(10, -e); return Math.round(x * p) / p; }
  const p = Math.pow(10, e); return Math.round(x / p) * p;
}
function sig(v, n) { return Number(v.toPrecision(n)).toString().replace("-", "−"); }

// withU writes value ± U rounded by roundU.
function withU(v, u) {
  const [vs, us] = roundU(v, u);
  if (vs === "—") return vs;
  return us === null ? vs + " (U not evaluated)" : `${vs} ± ${us}`;
}

function fillVerdicts(loop) {
  const box = $("#verdicts");
  box.textContent = "";
  const vs = (loop && loop.verdicts) || [];
  if (!vs.length) { box.append(el("p", { class: "muted", text: "No grade applies to this loop." })); return; }
  const worst = vs.some(v => v.outcome === "fail") ? "fail" : vs.some(v => v.outcome === "undecided") ? "undecided" : "pass";
  box.append(el("p", { class: "verdict-head" }, el("span", { class: "verdict verdict-" + worst, id: "loop-verdict", text: worst }),
    ` against grade ${vs[0].grade}, rule ${vs[0].rule}`));
  const tb = el("tbody");
  for (const v of vs) {
    const lim = v.min !== null && v.max !== null ? `${fmt(v.min)} … ${fmt(v.max)}` : v.min !== null ? `≥ ${fmt(v.min)}` : `≤ ${fmt(v.max)}`;
    tb.append(el("tr", { "data-verdict": v.outcome }, el("td", { text: v.figure }), el("td", { class: "num", text: withU(v.value, v.u) + " " + v.unit }),
      el("td", { class: "num", text: lim + " " + v.unit }), el("td", {}, el("span", { class: "verdict verdict-" + v.outcome, text: v.outcome })),
      el("td", { class: "muted", text: v.note })));
  }
  box.append(el("table", { class: "grid" }, el("thead", {}, el("tr", {}, el("th", { text: "figure" }), el("th", { text: "value ± U" }),
    el("th", { text: "limit" }), el("th", { text: "verdict" }), el("th", { text: "conditions" }))), tb));
}

// ---------- compare ----------

const comparePlot = { plot: null };

async function addCompare() {
  if (!state.loop) return;
  const key = `${state.loop.run_id}#${state.loop.n}`;
  if (!state.compare.some(c => `${c.run_id}#${c.n}` === key)) state.compare.push({ run_id: state.loop.run_id, n: state.loop.n, loop: state.loop });
  drawCompare();
  $("#compare-add").textContent = "Added ✓";
  setTimeout(() => { $("#compare-add").textContent = "Add to compare"; }, 1200);
}

function drawCompare() {
  $("#compare-count").textContent = state.compare.length;
  const list = $("#compare-list");
  list.textContent = "";
  state.compare.forEach((c, i) => {
    const sw = el("span", { class: "sw" }); sw.style.background = COLOURS[i % COLOURS.length];
    const rm = el("button", { class: "quiet", text: "×", title: "remove" });
    rm.addEventListener("click", () => { state.compare.splice(i, 1); drawCompare(); });
    list.append(el("li", { "data-key": `${c.run_id}#${c.n}` }, sw, `${c.run_id} #${c.n}`, rm));
  });
  const bar = $("#compare-toolbar");
  if (!state.compare.length) { comparePlot.plot.set({ series: [], empty: "no loop added yet" }); return; }
  comparePlot.plot.set(loopSpec(state.compare.map(c => c.loop), segValue(bar.querySelector('[data-name="ordinate"]')),
    segValue(bar.querySelector('[data-name="units"]')), false));
}

// ---------- trend ----------

const trendPlot = { plot: null };

function refreshFigureList() {
  const dl = $("#figure-names");
  dl.textContent = "";
  for (const n of [...state.figureNames].sort()) dl.append(el("option", { value: n }));
}

function timeTicks(xa) {
  const span = xa.hi - xa.lo, day = 86400e3;
  const steps = [60e3, 5 * 60e3, 15 * 60e3, 3600e3, 3 * 3600e3, 6 * 3600e3, 12 * 3600e3, day, 2 * day, 7 * day, 14 * day, 30 * day, 91 * day, 365 * day];
  let step = steps[steps.length - 1];
  for (const s of steps) if (span / s <= 7) { step = s; break; }
  const out = [];
  for (let v = Math.ceil(xa.lo / step) * step; v <= xa.hi; v += step) {
    const d = new Date(v).toISOString();
    out.push({ v, label: step >= day ? d.slice(0, 10) : d.slice(5, 16).replace("T", " ") });
  }
  return out;
}

async function drawTrend(ev) {
  if (ev) ev.preventDefault();
  const spec = $("#t-specimen").value.trim(), fig = $("#t-figure").value.trim(), since = $("#t-since").value;
  const lo = parseFloat($("#t-lo").value), hi = parseFloat($("#t-hi").value);
  const msg = $("#trend-msg");
  const q = new URLSearchParams({ specimen: spec, figure: fig });
  if (since) q.set("since", since);
  for (const [id, key] of [["#t-kind", "kind"], ["#t-amp", "amplitude"], ["#t-tol", "tol"], ["#t-recipe", "recipe"], ["#t-fixture", "fixture"], ["#t-rule", "rule"]]) {
    const v = $(id).value.trim();
    if (v) q.set(key, key === "tol" ? String(parseFloat(v) / 100) : v);
  }
  if (isFinite(lo)) q.set("lo", lo);
  if (isFinite(hi)) q.set("hi", hi);
  let data;
  try { data = await api("/api/v1/trend?" + q); } catch (e) { msg.textContent = e.message; msg.className = "msg-err"; return; }
  const pts = data.points.filter(p => p.value !== null);
  // Each point is judged with its U by the decision rule (on the server).
  const judged = (p) => p.verdict || "";
  const inside = (v, p) => !p || judged(p) !== "fail";
  const count = (o) => pts.filter(p => judged(p) === o).length;
  const outN = count("fail"), undN = count("undecided");
  msg.className = outN ? "msg-err" : "muted";
  msg.textContent = pts.length ? `${pts.length} value(s) of ${fig} for ${spec}` + (outN ? `, ${outN} fail` : "") + (undN ? `, ${undN} undecided` : "") +
    (data.limits ? ` (rule ${data.limits.rule})` : "") : `no stored ${fig} for ${spec} matching the filter`;
  const times = pts.map(p => Date.parse(p.at));
  let xlim = null;
  if (pts.length) {
    const a = Math.min(...times), b = Math.max(...times), pad = Math.max((b - a) * 0.08, 60e3);
    xlim = [a - pad, b + pad];
  }
  const unit = pts.length ? (state.run && state.loop && (state.loop.figures.find(f => f.name === fig) || {}).unit) || "" : "";
  trendPlot.plot.set({
    series: [{ xs: times, ys: pts.map(p => p.value), colour: "#9fb8b4", width: 1 }],
    points: pts.map((p, i) => ({ x: times[i], y: p.value, u: p.u, cls: judged(p) === "fail" ? "out" : judged(p) === "undecided" ? "undecided" : "in", title: `${p.run_id} #${p.loop}: ${withU(p.value, p.u)} ${judged(p)}` })),
    hlines: isFinite(lo) || isFinite(hi) || !data.limits ? [{ y: lo }, { y: hi }] :
      [{ y: data.limits.lo ?? NaN, label: data.limits.source }, { y: data.limits.hi ?? NaN, label: data.limits.source }],
    xlabel: "started (UTC)", ylabel: fig + (unit ? ` (${unit})` : ""), xlim, xfixed: true, xticks: timeTicks,
    empty: "no values to draw",
  });
  const tb = $("#trend-table tbody");
  tb.textContent = "";
  pts.forEach((p) => tb.append(el("tr", { class: judged(p) === "fail" ? "out" : "", "data-verdict": judged(p) }, el("td", { text: when(p.at) }), el("td", { text: p.run_id }),
    el("td", { text: p.loop }), el("td", { text: p.kind ? `${p.kind} ±${fmt(p.amplitude, 4)} ${p.amplitude_unit}` : "" }),
    el("td", { class: "num", text: withU(p.value, p.u) }),
    el("td", {}, judged(p) ? el("span", { class: "verdict verdict-" + judged(p), text: judged(p) }) : "—"))));
}

// ---------- live ----------

const livePlot = { plot: null };
let liveDrawPending = false;

function liveEvent(kind, ev) {
  const L = state.live;
  if (ev.run_id && ev.run_id !== L.run) {
    // Keep following the active run; switch when it has ended or another starts.
    if (L.active && !(kind === "state" && ev.state === "running")) return;
    L.run = ev.run_id; L.loops = {}; L.count = 0; L.step = ""; L.state = ""; L.active = false;
    $("#live-progress").style.width = "0";
  }
  if (ev.run_id !== L.run) return;
  $("#live-run").textContent = L.run;
  if (kind === "state") {
    L.state = ev.state; L.active = ev.state === "queued" || ev.state === "running";
    $("#live-state").textContent = ev.state + (ev.reason ? ` (${ev.reason})` : "");
    $("#live-dot").classList.toggle("on", L.active);
    $("#live-abort").disabled = !L.active;
    loadRuns();
    if (!L.active) { if (ev.state === "finished") $("#live-progress").style.width = "100%"; }
  } else if (kind === "progress") {
    L.step = `${ev.step || 0} of ${ev.steps || 0}` + (ev.step_name ? ` — ${ev.step_name}` : "");
    $("#live-step").textContent = L.step;
    if (ev.fraction !== undefined) $("#live-progress").style.width = (100 * Math.min(1, Math.max(0, ev.fraction))).toFixed(1) + "%";
    if (!L.state) { L.state = "running"; L.active = true; $("#live-state").textContent = "running"; $("#live-abort").disabled = false; $("#live-dot").classList.add("on"); }
  } else if (kind === "sample") {
    const n = ev.loop || 0;
    if (!L.loops[n]) L.loops[n] = { xs: [], ys: [] };
    const lp = L.loops[n];
    if (lp.xs.length >= 100000) { lp.xs.splice(0, 10000); lp.ys.splice(0, 10000); } // bounded memory on long runs
    lp.xs.push(ev.h_a_m ?? NaN); lp.ys.push(ev.b_t ?? NaN);
    L.count++;
    $("#live-count").textContent = L.count;
    if (!liveDrawPending) { liveDrawPending = true; requestAnimationFrame(drawLive); }
  }
}

function drawLive() {
  liveDrawPending = false;
  const L = state.live, keys = Object.keys(L.loops).map(Number).sort((a, b) => a - b);
  let hmax = 0, ymax = 0;
  for (const k of keys) for (let i = 0; i < L.loops[k].xs.length; i++) {
    hmax = Math.max(hmax, Math.abs(L.loops[k].xs[i]) || 0); ymax = Math.max(ymax, Math.abs(L.loops[k].ys[i]) || 0);
  }
  const sc = scaleFor("si", hmax, ymax);
  // The live B estimate starts from the integrator's zero, not from the
  // specimen's state: each trace is drawn centred on the midpoint of its
  // own extremes, as a symmetric cyclic loop is centred after storing.
  const centre = (ys) => {
    let lo = Infinity, hi = -Infinity;
    for (const y of ys) if (isFinite(y)) { lo = Math.min(lo, y); hi = Math.max(hi, y); }
    return isFinite(lo) ? (lo + hi) / 2 : 0;
  };
  const series = keys.map((k, i) => {
    const c = centre(L.loops[k].ys);
    return {
      label: k ? `loop ${k}` : "demagnetize, condition and other steps", key: "live-" + k, cls: "live", width: i === keys.length - 1 ? 2 : 1.2,
      colour: i === keys.length - 1 ? COLOURS[0] : "#a9b7b3",
      xs: L.loops[k].xs.map(v => v * sc.hMul), ys: L.loops[k].ys.map(v => (v - c) * sc.yMul),
    };
  });
  livePlot.plot.set({ series, xlabel: `H (${sc.hUnit}), live estimate`, ylabel: `B (${sc.yUnit}), live estimate, centred`, empty: "waiting for samples" }, true);
}

async function streamEvents() {
  const pill = $("#stream-state");
  let delay = 1000;
  for (;;) {
    try {
      const headers = {};
      if (state.key) headers["Authorization"] = "Bearer " + state.key;
      const resp = await fetch("/api/v1/events", { headers, cache: "no-store" });
      if (!resp.ok) throw new Error("event stream: " + resp.status);
      pill.textContent = "stream: live"; pill.className = "pill pill-on";
      delay = 1000;
      const reader = resp.body.getReader(), dec = new TextDecoder();
      let buf = "";
      for (;;) {
        const { value, done } = await reader.read();
        if (done) break;
        buf += dec.decode(value, { stream: true });
        let i;
        while ((i = buf.indexOf("\n\n")) >= 0) {
          const block = buf.slice(0, i); buf = buf.slice(i + 2);
          let kind = "", data = "";
          for (const line of block.split("\n")) {
            if (line.startsWith("event: ")) kind = line.slice(7);
            else if (line.startsWith("data: ")) data += line.slice(6);
          }
          if (kind && kind !== "hello" && data) { try { liveEvent(kind, JSON.parse(data)); } catch (e) { /* one bad event */ } }
        }
      }
    } catch (e) { /* retried below */ }
    pill.textContent = "stream: offline"; pill.className = "pill pill-off";
    await new Promise(r => setTimeout(r, delay));
    delay = Math.min(delay * 2, 15000);
  }
}

// ---------- mutations ----------

// armAbort makes b a two-click abort of the run idOf() names.
function armAbort(b, msg, idOf) {
  let armed = false, timer = null;
  const label = b.textContent;
  b.addEventListener("click", async () => {
    const id = idOf();
    if (!id) return;
    if (!armed) {
      armed = true; b.textContent = "Confirm: abort and ramp to zero";
      timer = setTimeout(() => { armed = false; b.textContent = label; }, 5000);
      return;
    }
    clearTimeout(timer); armed = false; b.textContent = label;
    try {
      await api(`/api/v1/runs/${encodeURIComponent(id)}/abort`, { method: "POST" });
      msg.textContent = `abort of ${id} accepted; the current is being ramped down`; msg.className = "msg-ok";
    } catch (e) {
      msg.textContent = (e.status === 401 || e.status === 403 ? "not allowed: " : "") + e.message; msg.className = "msg-err";
    }
  });
}

async function startRecipe(ev) {
  ev.preventDefault();
  const msg = $("#start-msg");
  const fx = $("#s-fixture").value.trim(), sp = $("#s-specimen").value;
  const q = new URLSearchParams();
  if (fx) q.set("fixture", fx);
  if (sp) q.set("specimen", sp);
  try {
    const res = await api("/api/v1/runs" + (q.toString() ? "?" + q : ""), {
      method: "POST", headers: { "Content-Type": "application/yaml" }, body: $("#s-recipe").value });
    msg.textContent = `run ${res.run_id} queued` + (sp ? ` on specimen ${sp}` : "") + ` — follow it under Live`; msg.className = "msg-ok";
    loadRuns();
    loadMounts();
  } catch (e) {
    msg.textContent = (e.status === 401 || e.status === 403 ? "not allowed: " : "refused: ") + e.message; msg.className = "msg-err";
  }
}

// ---------- wiring ----------

function showView(name) {
  for (const b of document.querySelectorAll("#tabs .tab")) b.classList.toggle("on", b.dataset.view === name);
  for (const v of document.querySelectorAll(".view")) v.classList.toggle("on", v.id === "view-" + name);
}

function segs(bar, onChange) {
  for (const seg of bar.querySelectorAll(".seg")) {
    seg.addEventListener("click", (ev) => {
      const b = ev.target.closest("button");
      if (!b) return;
      for (const x of seg.querySelectorAll("button")) x.classList.toggle("on", x === b);
      onChange();
    });
  }
}

async function init() {
  loopPlot.plot = new Plot($("#loop-plot"));
  comparePlot.plot = new Plot($("#compare-plot"));
  trendPlot.plot = new Plot($("#trend-plot"));
  livePlot.plot = new Plot($("#live-plot"));
  loopPlot.plot.set({ series: [], empty: "pick a run on the left" });
  comparePlot.plot.set({ series: [], empty: "no loop added yet" });
  livePlot.plot.set({ series: [], empty: "no run under way since this page opened" });
  try { state.info = await api("/api/v1/info"); } catch (e) { /* defaults */ }
  loadOutbox();
  const fx = state.info.fixtures || [];
  for (const f of fx) $("#fixture-names").append(el("option", { value: f.name }));
  if (fx.length === 1) $("#s-fixture").value = fx[0].name;
  $("#s-fixtures-note").textContent = fx.length ? "fixtures: " + fx.map(f => f.name + (f.active_run ? " (busy)" : "")).join(", ") : "";
  // A run already active when the page opens can be followed and aborted.
  const busy = fx.find(f => f.active_run);
  if (busy) liveEvent("state", { run_id: busy.active_run, state: "running" });
  $("#key-input").value = state.key;
  const keyState = () => { $("#key-state").textContent = state.key ? "key kept" : (state.info.token_set ? "" : "this daemon accepts no changes"); };
  keyState();
  $("#key-form").addEventListener("submit", (ev) => {
    ev.preventDefault();
    state.key = $("#key-input").value.trim();
    if (state.key) sessionStorage.setItem("hystd.key", state.key); else sessionStorage.removeItem("hystd.key");
    keyState();
    loadRuns(); // a daemon that protects reads answers now
  });
  for (const b of document.querySelectorAll("#tabs .tab")) b.addEventListener("click", () => showView(b.dataset.view));
  $("#filter-form").addEventListener("submit", (ev) => { ev.preventDefault(); loadRuns(); });
  $("#filter-form").addEventListener("reset", () => setTimeout(loadRuns, 0));
  segs($("#loop-toolbar"), () => {
    $("#view-loop").classList.toggle("show-cgs", segValue($('#loop-toolbar [data-name="units"]')) === "cgs");
    drawLoop(false);
  });
  $("#q2-toggle").addEventListener("change", () => drawLoop(false));
  $("#zoom-reset").addEventListener("click", () => loopPlot.plot.resetZoom());
  $("#compare-add").addEventListener("click", addCompare);
  $("#compare-clear").addEventListener("click", () => { state.compare = []; drawCompare(); });
  segs($("#compare-toolbar"), drawCompare);
  $("#trend-form").addEventListener("submit", drawTrend);
  $("#s-confirm").addEventListener("change", () => { $("#start-btn").disabled = !$("#s-confirm").checked; });
  $("#start-form").addEventListener("submit", startRecipe);
  armAbort($("#live-abort"), $("#live-abort-msg"), () => state.live.run);
  for (const id of ["#dl-svg", "#dl-png"]) {
    // With a key, fetch with the header (a daemon may protect reads) and hand over a file.
    $(id).addEventListener("click", async (ev) => {
      if (!state.key || !state.loop) return;
      ev.preventDefault();
      const a = ev.currentTarget;
      const resp = await fetch(a.href, { headers: { Authorization: "Bearer " + state.key } });
      if (!resp.ok) { a.title = "HTTP " + resp.status; return; }
      const url = URL.createObjectURL(await resp.blob());
      const tmp = el("a", { href: url, download: `${state.loop.run_id}-loop${state.loop.n}.${id === "#dl-svg" ? "svg" : "png"}` });
      document.body.append(tmp); tmp.click(); tmp.remove();
      setTimeout(() => URL.revokeObjectURL(url), 10000);
    });
  }
  document.addEventListener("click", (ev) => {
    // Picking a run also fills the trend form with its specimen.
    const li = ev.target.closest("#runs-list li");
    if (li && !$("#t-specimen").value) {
      const meta = li.querySelector(".r-meta");
      if (meta) $("#t-specimen").value = meta.textContent.split(" · ")[0];
    }
  });
  await loadRuns();
  await loadSpecimens();
  await loadMounts();
  setInterval(loadMounts, 3000);
  streamEvents();
  document.body.dataset.ready = "1";
}

document.addEventListener("DOMContentLoaded", init);

// ---------- specimens and mounting ----------

async function loadSpecimens() {
  let ids = [];
  try { ids = await api("/api/v1/specimens"); } catch (e) { return; }
  const sel = $("#s-specimen");
  for (const id of ids) sel.append(el("option", { value: id, text: id }));
}

// loadMounts lists the queued runs waiting for their specimen to be mounted,
// each with a button that confirms the mount (needs the access key).
async function loadMounts() {
  let ws = [];
  try { ws = await api("/api/v1/mounts"); } catch (e) { return; }
  const box = $("#mounts");
  const shown = [...box.querySelectorAll("li")].map(li => li.dataset.runId).join(",");
  if (shown === ws.map(w => w.run_id).join(",")) return;
  box.textContent = "";
  box.hidden = !ws.length;
  if (!ws.length) return;
  box.append(el("h3", { text: "Waiting for a specimen" }));
  const ul = el("ul");
  for (const w of ws) {
    const b = el("button", { class: "mount-ok", text: `${w.specimen} is mounted` });
    const m = el("span", { class: "muted" });
    b.addEventListener("click", async () => {
      try {
        await api(`/api/v1/runs/${encodeURIComponent(w.run_id)}/mount`, { method: "POST" });
        m.textContent = "confirmed; the run starts"; m.className = "msg-ok";
        setTimeout(loadMounts, 500);
      } catch (e) { m.textContent = e.message; m.className = "msg-err"; }
    });
    ul.append(el("li", { "data-run-id": w.run_id },
      el("div", { text: `Fixture ${w.fixture}: take out ${w.mounted || "the specimen"}, mount ${w.specimen}, with the supply at zero.` }),
      el("div", { class: "r-id", text: w.run_id }), b, " ", m));
  }
  box.append(ul);
}
