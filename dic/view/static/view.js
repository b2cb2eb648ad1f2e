// The review page of `dic view`: looks things up from the local server, draws them.
// Every number shown comes from the Python library through the server's small JSON interface.
"use strict";

const TOKEN = document.querySelector('meta[name="view-token"]').content;
const $ = (id) => document.getElementById(id);
const SVGNS = "http://www.w3.org/2000/svg";
const state = {info: null, k: 0, zoom: 1, map: null, busy: false, again: false,
               pending: [], gauge: null, kept: [], point: null, roi: {outer: null, holes: []},
               scale: null, drag: null};
window.dicView = state;  // for whoever wants to look at what the page holds

async function api(path, params = {}, body = null) {
  const q = new URLSearchParams(Object.assign({}, params, {t: TOKEN}));
  const opts = body === null ? {} : {method: "POST", body: JSON.stringify(body),
                                     headers: {"Content-Type": "application/json"}};
  const r = await fetch(path + "?" + q.toString(), opts);
  const d = await r.json();
  if (!r.ok) throw new Error(d.error || r.statusText);
  return d;
}

function say(text, bad = false) {
  $("status").textContent = text;
  $("status").classList.toggle("bad", bad);
}

function fmt(v) {
  if (v === null || v === undefined) return "–";
  const a = Math.abs(v);
  return (a !== 0 && (a < 1e-3 || a >= 1e4)) ? v.toExponential(3) : v.toPrecision(4);
}

// ---- picture geometry: x = column, y = row, origin at the centre of the top-left pixel ----
function layout() {
  const [rows, cols] = state.info.image_shape;
  const room = $("stage").clientWidth - 4;
  state.zoom = Math.min(room / cols, 3);
  const pic = $("picture");
  pic.style.width = (cols * state.zoom) + "px";
  pic.style.height = (rows * state.zoom) + "px";
  $("marks").setAttribute("viewBox", `-0.5 -0.5 ${cols} ${rows}`);
  placeOverlay();
}

function placeOverlay() {
  const g = state.map ? state.map.geom : state.info.grid;
  if (!g) return;
  const o = $("overlay"), z = state.zoom;
  o.style.left = ((g.x0 - g.step / 2 + 0.5) * z) + "px";
  o.style.top = ((g.y0 - g.step / 2 + 0.5) * z) + "px";
  o.style.width = (g.nx * g.step * z) + "px";
  o.style.height = (g.ny * g.step * z) + "px";
}

function imagePoint(e) {
  const r = $("picture").getBoundingClientRect();
  return [(e.clientX - r.left) / state.zoom - 0.5, (e.clientY - r.top) / state.zoom - 0.5];
}

function gridCell(x, y) {
  const g = state.map.geom;
  const j = Math.round((x - g.x0) / g.step), i = Math.round((y - g.y0) / g.step);
  return (i >= 0 && j >= 0 && i < g.ny && j < g.nx) ? [i, j] : null;
}

// ---- marks drawn over the picture ----
function mark(tag, attrs, cls) {
  const el = document.createElementNS(SVGNS, tag);
  for (const [k, v] of Object.entries(attrs)) el.setAttribute(k, v);
  el.setAttribute("class", cls);
  $("marks").appendChild(el);
  return el;
}

function shapeMark(kind, pts, cls) {
  if (kind === "line" || kind === "scale")
    return mark("line", {x1: pts[0][0], y1: pts[0][1], x2: pts[1][0], y2: pts[1][1]}, cls);
  if (kind === "dot") return mark("circle", {cx: pts[0][0], cy: pts[0][1], r: 3}, cls);
  return mark("polygon", {points: pts.map((p) => p.join(",")).join(" ")}, cls);
}

function rectCorners(a, b) {
  return [[a[0], a[1]], [b[0], a[1]], [b[0], b[1]], [a[0], b[1]]];
}

// ---- charts: plain SVG line charts ----
function ticks(lo, hi, n = 5) {
  const span = hi - lo || Math.abs(hi) || 1;
  const raw = span / n, mag = Math.pow(10, Math.floor(Math.log10(raw)));
  const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => span / s <= n) || 10 * mag;
  const out = [], digits = Math.max(0, -Math.floor(Math.log10(step) + 1e-9));
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step)
    out.push([v, Math.abs(v) < step * 1e-6 ? "0" : (digits > 6 ? v.toExponential(1) : v.toFixed(digits))]);
  return out;
}

const COLOURS = ["#1f5f8b", "#b5532a", "#4a7d3a", "#7a4f9a", "#8a7a20", "#555"];

function chart(svg, xs, series, xlabel, ylabel, here = null) {
  svg.replaceChildren();
  const W = 640, H = svg.viewBox.baseVal.height, L = 70, R = 150, T = 26, B = 40;
  const add = (tag, attrs, text) => {
    const el = document.createElementNS(SVGNS, tag);
    for (const [k, v] of Object.entries(attrs)) el.setAttribute(k, v);
    if (text !== undefined) el.textContent = text;
    svg.appendChild(el);
    return el;
  };
  const fin = (v) => v !== null && Number.isFinite(v);
  const X = xs.filter(fin), Y = series.flatMap((s) => s.ys).filter(fin);
  if (!X.length || !Y.length) { add("text", {x: L, y: H / 2}, "nothing measured here"); return; }
  let [x0, x1] = [Math.min(...X), Math.max(...X)], [y0, y1] = [Math.min(...Y), Math.max(...Y)];
  if (x1 === x0) x1 = x0 + 1;
  if (y1 === y0) { y0 -= Math.abs(y0) * 0.1 || 1; y1 += Math.abs(y1) * 0.1 || 1; }
  const px = (x) => L + (x - x0) / (x1 - x0) * (W - L - R);
  const py = (y) => H - B - (y - y0) / (y1 - y0) * (H - T - B);
  add("rect", {x: L, y: T, width: W - L - R, height: H - T - B, class: "plotarea"});
  for (const [t, text] of ticks(x0, x1)) {
    add("line", {x1: px(t), x2: px(t), y1: H - B, y2: H - B + 4, class: "axis"});
    add("text", {x: px(t), y: H - B + 16, class: "tick mid"}, text);
  }
  for (const [t, text] of ticks(y0, y1)) {
    add("line", {x1: L - 4, x2: W - R, y1: py(t), y2: py(t), class: "gridline"});
    add("text", {x: L - 6, y: py(t) + 4, class: "tick end"}, text);
  }
  add("text", {x: (L + W - R) / 2, y: H - 6, class: "label mid"}, xlabel);
  add("text", {x: L, y: 16, class: "label"}, ylabel);
  if (here !== null && fin(here)) add("line", {x1: px(here), x2: px(here), y1: T, y2: H - B,
                                               class: "here"});
  series.forEach((s, n) => {
    let d = "", pen = false;
    s.ys.forEach((y, i) => {
      if (fin(y) && fin(xs[i])) { d += (pen ? "L" : "M") + px(xs[i]) + " " + py(y); pen = true; }
      else pen = false;
    });
    add("path", {d, class: "series", stroke: COLOURS[n % COLOURS.length]});
    s.ys.forEach((y, i) => { if (fin(y) && fin(xs[i])) add("circle", {cx: px(xs[i]), cy: py(y), r: 2.2, fill: COLOURS[n % COLOURS.length]}); });
    add("line", {x1: W - R + 10, x2: W - R + 28, y1: T + 6 + 16 * n, y2: T + 6 + 16 * n,
                 stroke: COLOURS[n % COLOURS.length], class: "series"});
    add("text", {x: W - R + 32, y: T + 10 + 16 * n, class: "tick"}, s.name);
  });
}

function across() {
  const a = $("against").value, info = state.info;
  const frames = [...Array(info.frames).keys()];
  if (a === "time") return [info.time, "time (s)", info.time[state.k]];
  if (a === "force") return [info.force, "force (N)", info.force[state.k]];
  return [frames, "frame", state.k];
}

function drawHistory() {
  const [xs, xl, here] = across();
  if (state.gauge) {
    const g = state.gauge, cols = Object.keys(g.columns).filter((c) => !c.endsWith(".length") &&
      !c.endsWith(".n") && !c.endsWith(".std"));
    chart($("chart"), xs, cols.map((c) => ({name: c.slice(g.name.length + 1), ys: g.columns[c]})),
          xl, g.kind === "line" ? "strain of the gauge line" : `${$("component").value} over the area`, here);
    $("charttitle").textContent = `Gauge ${g.name}`;
    $("chartnote").textContent = g.notes.join(" ");
  } else if (state.point) {
    const p = state.point;
    chart($("chart"), xs, [{name: p.component, ys: p.values}], xl, `${p.component} at the point`, here);
    $("charttitle").textContent = `Point at x ${p.x}, y ${p.y} px`;
    $("chartnote").textContent = "Value at the grid point nearest the click.";
  }
}

// ---- results page ----
function mapParams() {
  const p = {k: state.k, component: $("component").value, measure: $("measure").value,
             window: $("window").value, limits: $("limits").value, under: $("under").value};
  if (p.limits === "manual") { p.lo = $("mlo").value; p.hi = $("mhi").value; }
  return p;
}

async function showFrame() {
  if (state.busy) { state.again = true; return; }
  state.busy = true;
  try {
    do {
      state.again = false;
      const p = mapParams();
      const under = p.under === "ref" ? state.info.reference[0] : p.k;
      const src = `/api/image?k=${under}&t=${TOKEN}`;
      if ($("photo").getAttribute("src") !== src) $("photo").src = src;
      const d = await api("/api/map", p);
      state.map = d;
      $("overlay").src = d.map;
      placeOverlay();
      $("barimg").src = d.bar;
      $("lo").textContent = fmt(d.lo);
      $("hi").textContent = fmt(d.hi);
      if ($("limits").value !== "manual") { $("mlo").value = d.lo; $("mhi").value = d.hi; }
      $("framenum").textContent = `${p.k} (${state.info.image_names[p.k]})`;
      say(`Frame ${p.k}: ${d.n_measured} points with a strain value.`);
      $("overlay").dataset.frame = String(p.k);
      $("overlay").dataset.under = p.under;
      drawHistory();
      await redrawMarks();
    } while (state.again);
  } catch (err) { say(err.message, true); }
  state.busy = false;
}

function hoverResults(e) {
  const [x, y] = imagePoint(e), c = gridCell(x, y), m = state.map;
  let text = `x ${x.toFixed(1)}, y ${y.toFixed(1)} px`;
  if (c && m) {
    const n = c[0] * m.geom.nx + c[1], code = m.codes[n];
    if (code === "0" && m.values) text += `: ${m.component} = ${fmt(m.values[n])}`;
    else if (code !== "-") text += `: blank (${state.info.reasons[code]})`;
  }
  $("hover").textContent = text;
}

function tool() { return document.querySelector('input[name="tool"]:checked').value; }

// marks of the results page live in reference coordinates; over the image of a frame they
// are drawn where that material has moved (the library's displacements)
function setShapes(cls, list) {
  state.shapes = (state.shapes || []).filter((s) => s.cls !== cls).concat(list.map((s) => Object.assign({cls}, s)));
  return redrawMarks();
}

async function redrawMarks() {
  const shapes = state.shapes || [];
  let pos = shapes.map((s) => s.pts);
  if ($("under").value === "cur" && shapes.length) {
    try {
      const d = await api("/api/follow", {}, {k: state.k, points: shapes.flatMap((s) => s.pts)});
      let n = 0;
      pos = shapes.map((s) => s.pts.map(() => d.points[n++]));
    } catch (err) { say(err.message, true); }
  }
  $("marks").replaceChildren();
  shapes.forEach((s, i) => {
    if (pos[i].every((q) => q[0] !== null && q[1] !== null)) shapeMark(s.kind, pos[i], s.cls);
  });
}

async function referencePoint(e) {
  const p = imagePoint(e);
  if ($("under").value !== "cur") return p;
  const d = await api("/api/reference", {k: state.k, x: p[0], y: p[1]});
  return [d.x, d.y];
}

async function clickResults(e) {
  const t = tool();
  let p;
  try { p = await referencePoint(e); } catch (err) { say(err.message, true); return; }
  if (t === "point") {
    state.gauge = null; state.pending = [];
    try {
      state.point = await api("/api/point", {x: p[0], y: p[1], component: $("component").value,
                                              measure: $("measure").value, window: $("window").value});
      const v = state.point.values[state.k];
      $("hover").textContent = `${state.point.component} at x ${state.point.x}, y ${state.point.y} px, frame ${state.k}: ${fmt(v)}`;
      $("hover").dataset.value = v === null ? "" : String(v);
      drawHistory();
      await setShapes("draft", []);
      await setShapes("probe", [{kind: "dot", pts: [[state.point.x, state.point.y]]}]);
    } catch (err) { say(err.message, true); }
    return;
  }
  state.pending.push(p);
  const need = t === "poly" ? Infinity : 2;
  if (state.pending.length < need) {
    await setShapes("draft", [{kind: state.pending.length > 1 ? "poly" : "dot", pts: state.pending.slice()}]);
    return;
  }
  const pts = state.pending; state.pending = [];
  await measureGauge(t === "line" ? "line" : "area", t === "rect" ? rectCorners(pts[0], pts[1]) : pts);
}

async function endPolygon() {
  if (tool() !== "poly" || state.pending.length < 3) return;
  let pts = state.pending; state.pending = [];
  const same = (a, b) => Math.hypot(a[0] - b[0], a[1] - b[1]) < 2;
  pts = pts.filter((q, i) => i === 0 || !same(q, pts[i - 1]));
  await measureGauge("area", pts);
}

async function measureGauge(kind, points) {
  const name = $("gname").value.trim() || "gauge";
  say("Following the gauge through the frames…");
  try {
    const g = await api("/api/gauge", {}, {gauge: {kind, points, name}, component: $("component").value,
                                          measure: $("measure").value, window: Number($("window").value)});
    g.points = points;
    state.gauge = g; state.point = null;
    await setShapes("probe", []);
    await setShapes("draft", [{kind, pts: points}]);
    $("keep").disabled = false;
    drawHistory();
    say(`Gauge ${g.name}: ${g.frame.length} frames.`);
  } catch (err) { say(err.message, true); }
}

function clearMarks(cls) {
  for (const el of [...$("marks").querySelectorAll("." + cls)]) el.remove();
}

function listKept() {
  const ul = $("gauges");
  ul.replaceChildren();
  for (const g of state.kept) {
    const li = document.createElement("li");
    li.textContent = `${g.name} (${g.kind === "line" ? "line" : "area"}) `;
    const b = document.createElement("button");
    b.type = "button"; b.textContent = "delete";
    b.addEventListener("click", () => { state.kept = state.kept.filter((q) => q !== g); listKept(); });
    const s = document.createElement("button");
    s.type = "button"; s.textContent = "show";
    s.addEventListener("click", () => { state.gauge = g; state.point = null; drawHistory(); });
    const r = document.createElement("button");
    r.type = "button"; r.textContent = "rename";
    r.addEventListener("click", () => rename(g));
    li.append(s, r, b);
    ul.appendChild(li);
  }
  setShapes("kept", state.kept.map((g) => ({kind: g.kind, pts: g.points})));
  $("exportcsv").disabled = $("exporttoml").disabled = state.kept.length === 0;
}

function rename(g) {
  const name = (window.prompt(`New name for ${g.name}:`, g.name) || "").trim();
  if (!name || name === g.name) return;
  if (!/^[^,"\[\n]+$/.test(name)) { say("A name without commas, quotes or brackets, please.", true); return; }
  if (state.kept.some((q) => q.name === name)) { say(`A kept gauge is already called ${name}.`, true); return; }
  // the history's columns carry the name: rename them too
  const cols = {}, units = {};
  for (const [c, v] of Object.entries(g.columns)) cols[name + c.slice(g.name.length)] = v;
  for (const [c, v] of Object.entries(g.units)) units[name + c.slice(g.name.length)] = v;
  Object.assign(g, {name, columns: cols, units});
  listKept();
  if (state.gauge === g) drawHistory();
}

function keep() {
  const g = state.gauge;
  if (!g) return;
  if (state.kept.some((q) => q.name === g.name)) { say(`A kept gauge is already called ${g.name}; give this one another name and draw it again.`, true); return; }
  state.kept.push(g);
  state.shapes = (state.shapes || []).filter((s) => s.cls !== "draft");
  listKept();
  const m = /^(.*?)(\d+)$/.exec(g.name);
  $("gname").value = m ? m[1] + (Number(m[2]) + 1) : g.name + "2";
  $("keep").disabled = true;
}

function download(name, text, type) {
  const a = document.createElement("a");
  a.href = URL.createObjectURL(new Blob([text], {type}));
  a.download = name;
  document.body.appendChild(a); a.click(); a.remove();
}

async function exportKept(what) {
  try {
    const d = await api("/api/export", {}, {gauges: state.kept.map((g) => ({kind: g.kind, points: g.points, name: g.name})),
                                           component: $("component").value, measure: $("measure").value,
                                           window: Number($("window").value)});
    state.exported = d;
    if (what === "csv") download("gauges.csv", d.csv, "text/csv");
    else download("gauges.toml", d.toml, "text/plain");
    say(`Saved ${state.kept.length} gauge(s).`);
  } catch (err) { say(err.message, true); }
}

async function showQuality() {
  const box = $("qualitybox");
  box.hidden = !box.hidden;
  if (box.hidden) return;
  try {
    const q = await api("/api/quality");
    const xs = [...Array(q.measured.length).keys()];
    chart($("qchart1"), xs, [{name: "median", ys: q.zncc_median}, {name: "lowest", ys: q.zncc_min}], "frame", "ZNCC of measured points");
    chart($("qchart2"), xs, [{name: "measured", ys: q.measured}], "frame", `points measured (of ${q.points})`);
    $("qnote").textContent = (q.updates.length ? `New reference image at frames ${q.updates.join(", ")}.` : "One reference image for every frame.")
      + (q.min_zncc !== null && q.min_zncc !== undefined ? ` Points below ZNCC ${q.min_zncc} are left blank.` : "");
  } catch (err) { say(err.message, true); }
}

function startResults(info) {
  for (const c of info.components) $("component").add(new Option(c, c));
  for (const m of info.measures) $("measure").add(new Option(m, m));
  $("measure").value = info.measure;
  $("window").value = info.window;
  $("frame").max = info.frames - 1;
  state.k = info.frames - 1;  // open on the last frame: the most deformed state
  $("frame").value = state.k;
  if (info.has_time) $("against").add(new Option("time", "time"));
  if (info.has_force) $("against").add(new Option("force", "force"));
  $("frame").addEventListener("input", () => { state.k = Number($("frame").value); showFrame(); });
  for (const id of ["component", "measure", "window", "under", "mlo", "mhi"])
    $(id).addEventListener("change", () => { if (id !== "under") { state.point = null; state.gauge = null; } showFrame(); });
  $("limits").addEventListener("change", () => { $("manual").hidden = $("limits").value !== "manual"; showFrame(); });
  $("opacity").addEventListener("input", () => { $("overlay").style.opacity = $("opacity").value / 100; });
  $("overlay").style.opacity = $("opacity").value / 100;
  $("against").addEventListener("change", drawHistory);
  $("picture").addEventListener("mousemove", hoverResults);
  $("picture").addEventListener("click", clickResults);
  $("picture").addEventListener("dblclick", endPolygon);
  $("keep").addEventListener("click", keep);
  $("exportcsv").addEventListener("click", () => exportKept("csv"));
  $("exporttoml").addEventListener("click", () => exportKept("toml"));
  $("quality").addEventListener("click", showQuality);
  document.querySelectorAll('input[name="tool"]').forEach((r) => r.addEventListener("change", () => { state.pending = []; setShapes("draft", []); }));
  showFrame();
}

// ---- set-up page ----
function stool() { return document.querySelector('input[name="stool"]:checked').value; }

function drawSetup() {
  clearMarks("roi"); clearMarks("hole"); clearMarks("scale"); clearMarks("draft");
  const r = state.roi;
  if (r.outer) shapeMark("poly", r.outer.kind === "rectangle" ? rectCorners(...r.outer.points) : r.outer.points, "roi");
  for (const h of r.holes) shapeMark("poly", h.kind === "rectangle" ? rectCorners(...h.points) : h.points, "hole");
  if (state.scale) shapeMark("scale", [state.scale.slice(0, 2), state.scale.slice(2)], "scale");
  if (state.pending.length > 1) shapeMark("poly", state.pending, "draft");
  if (state.drag && state.drag.now) shapeMark("poly", rectCorners(state.drag.from, state.drag.now), "draft");
  const n = state.roi.holes.length;
  $("scaletext").textContent = state.scale ? scaleText() : "No scale line yet.";
  say(r.outer ? `Region drawn${n ? ` with ${n} hole(s)` : ""}.` : "Draw the region of interest.");
}

function scaleText() {
  const s = state.scale, L = Math.hypot(s[2] - s[0], s[3] - s[1]), mm = Number($("lengthmm").value);
  return `Line of ${L.toFixed(1)} px` + (mm > 0 ? ` = ${(mm / L).toPrecision(4)} mm per px.` : ".");
}

function setupDown(e) {
  const t = stool();
  if (t === "rect" || t === "hole") { state.drag = {from: imagePoint(e), now: null}; e.preventDefault(); }
}

function setupMove(e) {
  const [x, y] = imagePoint(e);
  $("hover").textContent = `x ${x.toFixed(1)}, y ${y.toFixed(1)} px`;
  if (state.drag) { state.drag.now = [x, y]; drawSetup(); }
}

function setupUp(e) {
  if (!state.drag) return;
  const a = state.drag.from, b = imagePoint(e);
  state.drag = null;
  if (Math.abs(a[0] - b[0]) < 2 || Math.abs(a[1] - b[1]) < 2) { drawSetup(); return; }
  const shape = {kind: "rectangle", points: [a, b]};
  if (stool() === "rect") state.roi = {outer: shape, holes: []};
  else if (state.roi.outer) state.roi.holes.push(shape);
  else say("Draw the region before its holes.", true);
  drawSetup();
}

function setupClick(e) {
  const t = stool(), p = imagePoint(e);
  if (t === "scale") {
    state.pending.push(p);
    if (state.pending.length === 2) { state.scale = [...state.pending[0], ...state.pending[1]]; state.pending = []; }
    drawSetup();
    if (state.pending.length === 1) shapeMark("dot", [p], "draft");
  } else if (t === "poly" || t === "holepoly") {
    state.pending.push(p);
    drawSetup();
  }
}

function setupDouble() {
  const t = stool();
  if ((t !== "poly" && t !== "holepoly") || state.pending.length < 3) return;
  const same = (a, b) => Math.hypot(a[0] - b[0], a[1] - b[1]) < 2;
  const pts = state.pending.filter((q, i, all) => i === 0 || !same(q, all[i - 1]));
  state.pending = [];
  const shape = {kind: "polygon", points: pts};
  if (t === "poly") state.roi = {outer: shape, holes: []};
  else if (state.roi.outer) state.roi.holes.push(shape);
  drawSetup();
}

function settings() {
  return {subset: Number($("subset").value), step: Number($("step").value),
          window: Number($("swindow").value), measure: $("smeasure").value};
}

async function checkPattern() {
  if (!state.roi.outer) { say("Draw the region first.", true); return; }
  say("Checking the pattern…");
  try {
    const d = await api("/api/check", {}, {roi: state.roi, subset: Number($("subset").value)});
    $("checkout").textContent = d.summary;
    $("checkout").dataset.verdict = d.verdict;
    say(`Pattern: ${d.verdict}.`);
  } catch (err) { say(err.message, true); }
}

async function adviseSettings() {
  if (!state.roi.outer) { say("Draw the region first.", true); return; }
  say("Trying settings on this image (this takes a while)…");
  try {
    const mm = Number($("lengthmm").value), s = state.scale;
    const scale = s && mm > 0 ? mm / Math.hypot(s[2] - s[0], s[3] - s[1]) : null;
    const d = await api("/api/advise", {}, {roi: state.roi, target: Number($("target").value), scale});
    $("checkout").textContent = d.summary;
    if (d.chosen) { $("subset").value = d.chosen.subset; $("step").value = d.chosen.step; $("swindow").value = d.chosen.window; }
    say(d.met ? "Suggested settings filled in." : "No setting meets the target; the closest is filled in.");
  } catch (err) { say(err.message, true); }
}

async function saveAnalysis() {
  if (!state.roi.outer) { say("Draw the region first.", true); return; }
  let overwrite = false;
  if (state.info.exists) {
    if (!window.confirm(`${state.info.out} exists. Replace it (its other settings are kept)?`)) return;
    overwrite = true;
  }
  try {
    const d = await api("/api/save", {}, {roi: state.roi, settings: settings(), overwrite,
                                          scale_line: state.scale, length_mm: state.scale ? Number($("lengthmm").value) : null});
    $("saved").textContent = d.text;
    state.info.exists = true;
    say(`Saved ${d.written}.`);
  } catch (err) { say(err.message, true); }
}

function startSetup(info) {
  $("subset").value = info.subset; $("step").value = info.step;
  $("swindow").value = info.window; $("smeasure").value = info.measure;
  $("outname").textContent = info.out;
  if (info.scale.line && info.scale.length_mm) { state.scale = info.scale.line; $("lengthmm").value = info.scale.length_mm; }
  if (info.roi.rectangle) { const r = info.roi.rectangle; state.roi.outer = {kind: "rectangle", points: [[r[0], r[1]], [r[2], r[3]]]}; }
  else if (info.roi.polygon) state.roi.outer = {kind: "polygon", points: info.roi.polygon};
  $("photo").src = `/api/image?k=0&t=${TOKEN}`;
  const pic = $("picture");
  pic.addEventListener("mousedown", setupDown);
  pic.addEventListener("mousemove", setupMove);
  pic.addEventListener("mouseup", setupUp);
  pic.addEventListener("click", setupClick);
  pic.addEventListener("dblclick", setupDouble);
  $("clearroi").addEventListener("click", () => { state.roi = {outer: null, holes: []}; state.pending = []; drawSetup(); });
  $("lengthmm").addEventListener("input", drawSetup);
  $("check").addEventListener("click", checkPattern);
  $("advise").addEventListener("click", adviseSettings);
  $("save").addEventListener("click", saveAnalysis);
  document.querySelectorAll('input[name="stool"]').forEach((r) => r.addEventListener("change", () => { state.pending = []; drawSetup(); }));
  drawSetup();
}

async function start() {
  try {
    const info = await api("/api/info");
    state.info = info;
    document.body.classList.add(info.mode);
    $("title").textContent = info.mode === "results" ? `Results: ${info.name}` : `Set-up: ${info.name}`;
    document.title = `dic view – ${info.name}`;
    layout();
    window.addEventListener("resize", layout);
    $("photo").addEventListener("load", () => { $("photo").dataset.loaded = "1"; });
    if (info.mode === "results") startResults(info); else startSetup(info);
  } catch (err) { say(err.message, true); }
}

start();
