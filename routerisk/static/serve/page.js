/* routerisk planning page. Every figure comes from the local JSON API (/api/...), which calls
   the same library functions as the commands. Text from map data is only ever put into the
   page with textContent (never as HTML). */
"use strict";

const $ = (id) => document.getElementById(id);
const token = new URLSearchParams(location.search).get("token");
const S = {
  info: null, points: [], markers: [], lastScore: null, lastDoc: null, drawnLayer: null,
  altLayers: [], alts: [], picked: null, highlight: null, compare: [], busy: null,
  area: [], areaMarkers: [], areaShape: null, drawing: false, planFiles: [],
};

/* ------------------------------------------------------------------ helpers */

function el(tag, text, cls) {
  const e = document.createElement(tag);
  if (text !== undefined && text !== null) e.textContent = String(text);
  if (cls) e.className = cls;
  return e;
}
function clear(node) { while (node.firstChild) node.removeChild(node.firstChild); }
function fmt(x, d = 3) { return (x === null || x === undefined) ? "–" : Number(x).toFixed(d); }
function showError(text) { const m = $("message"); m.textContent = text; m.hidden = !text; }

async function api(path, body, label) {
  showError("");
  if (S.busy) S.busy.abort();
  const ctl = new AbortController();
  S.busy = ctl;
  $("busy-text").textContent = (label || "Working") + "…";
  $("busy").hidden = false;
  const headers = { "Content-Type": "application/json" };
  if (token) headers["X-Routerisk-Token"] = token;
  try {
    const resp = await fetch(path, body === undefined ? { headers, signal: ctl.signal } :
      { method: "POST", headers, body: JSON.stringify(body), signal: ctl.signal });
    const type = resp.headers.get("content-type") || "";
    const doc = type.startsWith("application/json") ? await resp.json() : { text: await resp.text() };
    if (!resp.ok) { showError(doc.error || ("request failed: " + resp.status)); return null; }
    if (doc.made_from) showProvenance(doc.made_from);
    return doc;
  } catch (err) {
    if (err.name === "AbortError") showError("cancelled");
    else showError("the server did not answer: " + err.message);
    return null;
  } finally {
    if (S.busy === ctl) { S.busy = null; $("busy").hidden = true; }
  }
}

function showProvenance(p) {
  const ins = Object.keys(p.inputs || {}).sort().map((k) => {
    const r = p.inputs[k];
    return k + " " + (r.name || "") + " " + String(r.sha256 || "").slice(0, 12);
  });
  $("provenance").textContent = "routerisk " + p.routerisk_version + "; profile " +
    String(p.profile).slice(0, 12) + (ins.length ? "; " + ins.join("; ") : "");
}

function download(name, text, type) {
  const url = URL.createObjectURL(new Blob([text], { type }));
  const a = el("a");
  a.href = url; a.download = name;
  document.body.appendChild(a); a.click(); a.remove();
  setTimeout(() => URL.revokeObjectURL(url), 5000);
}

function tip(layer, text) {
  // the label is made when first shown (thousands of segments carry one)
  layer.bindTooltip(() => el("div", text), { sticky: true });
}

function bandColour(name) {
  const b = (S.info.bands || []).find((x) => x.name === name);
  return b ? b.colour : "#888";
}

function riskColour(perKm) {
  // per-km risk of a segment against the band thresholds of the profile
  let c = S.info.bands[0].colour;
  for (const b of S.info.bands) if (perKm >= b.from) c = b.colour;
  return c;
}

/* ------------------------------------------------------------------ map */

const map = L.map("map", { zoomControl: true, preferCanvas: false });
map.attributionControl.setPrefix('<a href="static/leaflet/LICENSE" target="_blank">Leaflet</a> (BSD-2), served locally');
const netCanvas = L.canvas({ padding: 0.2 });  // thousands of street segments: one canvas
const netLayer = L.layerGroup().addTo(map);
const srcLayer = L.layerGroup().addTo(map);
const routeLayer = L.layerGroup().addTo(map);
const markLayer = L.layerGroup().addTo(map);
let netTimer = null;

async function loadNetwork() {
  const t0 = performance.now();
  const b = map.getBounds();
  const q = [b.getWest(), b.getSouth(), b.getEast(), b.getNorth()].map((x) => x.toFixed(6));
  const headers = token ? { "X-Routerisk-Token": token } : {};
  const resp = await fetch("api/network?bbox=" + q.join(",") + "&zoom=" + map.getZoom(),
    { headers });
  if (!resp.ok) return;
  const doc = await resp.json();
  const t1 = performance.now();
  clearLayerGroups([netLayer, srcLayer]);
  S.networkShown = doc.segments;
  L.geoJSON(doc.edges, {
    interactive: true, renderer: netCanvas,
    style: (f) => ({ color: bandColour(f.properties.band), weight: 2, opacity: 0.55 }),
    onEachFeature: (f, layer) => tip(layer, (f.properties.segments > 1 ? "streets" :
      (f.properties.street || "unnamed street")) + " · " + f.properties.band),
  }).addTo(netLayer);
  const cats = {};
  for (const c of S.info.categories) cats[c.name] = c;
  for (const s of doc.sources) {
    const c = cats[s.category] || { colour: "#888", label: s.category };
    const m = L.circleMarker([s.lat, s.lon], { radius: 3, color: c.colour, weight: 1,
      fillOpacity: 0.8, interactive: true, renderer: netCanvas });
    tip(m, c.label + (s.name ? ": " + s.name : ""));
    m.addTo(srcLayer);
  }
  S.networkTimes = { fetch_ms: Math.round(t1 - t0), draw_ms: Math.round(performance.now() - t1) };
}
function clearLayerGroups(groups) { for (const g of groups) g.clearLayers(); }

map.on("click", (ev) => {
  if (S.drawing) { addVertex(ev.latlng); return; }
  if (currentPane() === "route") addPoint(ev.latlng);
});

/* ------------------------------------------------------------------ route points */

function pinIcon(i, n) {
  const end = i === n - 1 && n > 1;
  const pin = el("div", i === 0 ? "S" : (end ? "E" : String(i)),
    i === 0 ? "pin start" : (end ? "pin end" : "pin"));
  return L.divIcon({ className: "", html: pin, iconSize: [22, 22], iconAnchor: [11, 11] });
}

function addPoint(latlng) {
  S.points.push([latlng.lng, latlng.lat]);
  redrawPoints();
}

function redrawPoints() {
  markLayer.clearLayers();
  const n = S.points.length;
  S.markers = S.points.map((p, i) => {
    const m = L.marker([p[1], p[0]], { draggable: true, icon: pinIcon(i, n) });
    m.on("dragend", () => { const ll = m.getLatLng(); S.points[i] = [ll.lng, ll.lat]; redrawPoints(); });
    m.on("click", () => { S.points.splice(i, 1); redrawPoints(); });
    m.addTo(markLayer);
    return m;
  });
  const list = $("point-list");
  clear(list);
  S.points.forEach((p, i) => {
    const role = i === 0 ? "start" : (i === n - 1 ? "end" : "via");
    list.appendChild(el("li", role + "  " + p[1].toFixed(5) + ", " + p[0].toFixed(5)));
  });
}

function departText() {
  const d = $("depart-date").value, t = $("depart-time").value;
  if (!d || !t) return null;
  return d + "T" + t;
}

let routeFile = null;
$("route-file").addEventListener("change", async (ev) => {
  const f = ev.target.files[0];
  if (!f) return;
  routeFile = { name: f.name, text: await f.text() };
  S.points = []; redrawPoints();
  await scoreRoute();
});

function routeSpec() {
  if (routeFile && S.points.length < 2) return { file: routeFile };
  return { waypoints: S.points, name: "planned route", keep_vias: $("keep-vias").checked };
}

async function scoreRoute() {
  const depart = departText();
  if (!routeFile && S.points.length < 2) { showError("place at least a start and an end"); return; }
  const body = { route: routeSpec(), departs: depart ? [depart] : [] };
  const doc = await api("api/score", body, "Scoring");
  if (!doc) return;
  S.lastDoc = doc;
  S.lastBody = body;
  const s = doc.routes[0];
  S.lastScore = s;
  S.alts = []; S.picked = { score: s, drawn: doc.drawn[0], label: "plan" };
  addCompare(s, "plan");
  for (let i = 1; i < doc.routes.length; i++) addCompare(doc.routes[i], "file");
  showScore(s, doc.drawn[0]);
  clear($("alt-list")); $("alt-table").hidden = true; $("alt-note").textContent = "";
  drawRoutes();
  if (!depart && s.depart) {
    $("depart-date").value = s.depart.slice(0, 10); $("depart-time").value = s.depart.slice(11, 16);
  }
  loadWeek();
}

function showScore(s, drawn) {
  $("route-result").hidden = false;
  $("route-title").textContent = s.name + " · departing " + s.depart.slice(0, 16).replace("T", " ");
  $("total-risk").textContent = fmt(s.risk);
  $("risk-per-km").textContent = fmt(s.risk_per_km);
  $("total-km").textContent = fmt(s.length_km, 2) + " km";
  $("total-min").textContent = fmt(s.duration_min, 1) + " min";
  $("rel-index").textContent = fmt(s.relative_index, 2);
  $("crossings").textContent = fmt(s.crossings, 1);
  $("left-turns").textContent = s.left_turns;
  $("break-count").textContent = s.rule_breaks.length;
  const bars = $("category-bars"); clear(bars);
  const labels = { baseline: "street baseline", crossings: "crossings" };
  for (const c of S.info.categories) labels[c.name] = c.label;
  const entries = Object.entries(s.by_category).sort((a, b) => b[1] - a[1]);
  const top = Math.max(1e-9, ...entries.map((e) => e[1]));
  for (const [k, v] of entries) {
    const row = el("div", null, "bar");
    row.appendChild(el("span", labels[k] || k, "name"));
    const fill = el("span", null, "fill");
    const cat = S.info.categories.find((c) => c.name === k);
    fill.style.width = Math.round(180 * v / top) + "px";
    fill.style.background = cat ? cat.colour : "#7d8a94";
    row.appendChild(fill);
    row.appendChild(el("span", fmt(v), "val"));
    bars.appendChild(row);
  }
  const bl = $("break-list"); clear(bl);
  if (!s.rule_breaks.length) bl.appendChild(el("li", "none"));
  for (const b of s.rule_breaks) {
    const li = el("li", b.rule + " · " + (b.street || "unnamed street") + " · " + b.time.slice(11, 16));
    li.addEventListener("mouseenter", () => flash(L.circleMarker([b.lat, b.lon],
      { radius: 12, color: "#c1121f", weight: 3, fill: false })));
    li.addEventListener("mouseleave", unflash);
    bl.appendChild(li);
  }
  const hl = $("hotspot-list"); clear(hl);
  for (const h of s.hotspots) {
    const li = el("li", (h.street || "unnamed street") + " · risk " + fmt(h.risk) + " (" +
      Math.round(100 * h.share) + " %) · " + h.reasons.join(", "));
    li.addEventListener("mouseenter", () => {
      const f = drawn.segments.features.find((x) => x.properties.seq === h.seq);
      if (f) flash(L.geoJSON(f, { style: { color: "#111", weight: 10, opacity: 0.45 } }));
    });
    li.addEventListener("mouseleave", unflash);
    hl.appendChild(li);
  }
}

function flash(layer) { unflash(); S.highlight = layer.addTo(map); }
function unflash() { if (S.highlight) { map.removeLayer(S.highlight); S.highlight = null; } }

function drawRoutes() {
  routeLayer.clearLayers();
  S.alts.forEach((a, i) => {
    if (S.picked && S.picked.label === a.label) return;
    L.geoJSON(a.drawn.segments, { style: { color: "#5b4b8a", weight: 4, opacity: 0.5,
      dashArray: "6 6" } }).addTo(routeLayer);
  });
  const d = S.picked.drawn;
  L.geoJSON(d.segments, {
    style: (f) => ({ color: riskColour(f.properties.risk_per_km), weight: 7, opacity: 0.9 }),
    onEachFeature: (f, layer) => tip(layer, (f.properties.street || "unnamed street") +
      " · risk " + fmt(f.properties.risk) + " · " + f.properties.time.slice(11, 16)),
  }).addTo(routeLayer);
}

async function findAlternatives() {
  if (!S.lastBody) { showError("score a route first"); return; }
  const body = { ...S.lastBody, departs: [S.lastScore.depart],
    max_extra_time: Number($("max-extra").value) / 100, count: Number($("alt-count").value) };
  const doc = await api("api/alternatives", body, "Looking for alternatives");
  if (!doc) return;
  const r = doc.routes[0], d = doc.drawn[0];
  S.alts = r.alternatives.map((a, i) => ({ score: { ...a, name: r.name + " (" + a.label + ")" },
    drawn: d.alternatives[i], label: a.label, alt: a }));
  $("alt-note").textContent = r.note || (S.alts.length ? "" : "no alternative within the bounds");
  const tb = $("alt-list"); clear(tb);
  const rows = [{ score: r.planned, drawn: d.planned, label: "plan" }, ...S.alts];
  S.picked = rows[0];
  rows.forEach((row, i) => {
    const tr = el("tr");
    const td = el("td"); const radio = el("input");
    radio.type = "radio"; radio.name = "pick"; radio.value = row.label; radio.checked = i === 0;
    radio.addEventListener("change", () => pick(row));
    td.appendChild(radio); tr.appendChild(td);
    tr.appendChild(el("td", row.label));
    tr.appendChild(el("td", fmt(row.score.risk), "num"));
    tr.appendChild(el("td", row.alt ? (row.alt.risk_change_pct > 0 ? "+" : "") +
      fmt(row.alt.risk_change_pct, 1) + " %" : "", "num"));
    tr.appendChild(el("td", fmt(row.score.duration_min, 1) + " min", "num"));
    tr.appendChild(el("td", row.score.rule_breaks.length, "num"));
    if (row.alt && row.alt.caveats.length) tr.title = row.alt.caveats.join("; ");
    tb.appendChild(tr);
  });
  $("alt-table").hidden = false;
  for (const a of S.alts) addCompare(a.score, a.label);
  drawRoutes();
}

function pick(row) {
  S.picked = row;
  $("picked-label").textContent = "chosen: " + row.label;
  showScore({ ...row.score, name: row.score.name || S.lastScore.name }, row.drawn);
  drawRoutes();
  loadWeek();
}

async function exportRoute(format) {
  if (!S.picked) { showError("score a route first"); return; }
  const d = S.picked.drawn;
  const name = (S.picked.label === "plan" ? S.lastScore.name : S.lastScore.name + " " + S.picked.label);
  const resp = await api("api/export", { name, depart: d.depart, line: d.line, format },
    "Writing the file");
  if (!resp) return;
  const safe = name.replace(/[^A-Za-z0-9_-]+/g, "-").replace(/^-+|-+$/g, "") || "route";
  download(safe + (format === "gpx" ? ".gpx" : ".geojson"), resp.text,
    format === "gpx" ? "application/gpx+xml" : "application/geo+json");
}

/* ------------------------------------------------------------------ week chart */

const SVG = "http://www.w3.org/2000/svg";
function svgEl(tag, attrs) {
  const e = document.createElementNS(SVG, tag);
  for (const [k, v] of Object.entries(attrs || {})) e.setAttribute(k, v);
  return e;
}
const DAYS = ["Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"];

function barChart(node, values, opts) {
  clear(node);
  const W = 700, H = 150, pad = 18, n = values.length;
  const svg = svgEl("svg", { viewBox: "0 0 " + W + " " + H, preserveAspectRatio: "none" });
  const top = Math.max(1e-9, ...values);
  const bw = (W - 2) / n;
  values.forEach((v, i) => {
    const h = (H - pad - 4) * v / top;
    const r = svgEl("rect", { x: 1 + i * bw, y: H - pad - h, width: Math.max(bw - 0.6, 0.5),
      height: h, fill: opts.colour(i), class: "slot" });
    const t = svgEl("title"); t.textContent = opts.label(i); r.appendChild(t);
    if (opts.click) r.addEventListener("click", () => opts.click(i));
    svg.appendChild(r);
  });
  for (let d = 0; d < 7; d++) {
    const x = 1 + d * 24 * bw;
    svg.appendChild(svgEl("line", { x1: x, x2: x, y1: 0, y2: H - pad, stroke: "#ccc" }));
    const t = svgEl("text", { x: x + 3, y: H - 4, "font-size": 11, fill: "#555" });
    t.textContent = DAYS[d]; svg.appendChild(t);
  }
  node.appendChild(svg);
}

async function loadWeek() {
  if (!S.lastBody || !S.picked) return;
  const date = (S.picked.score.depart || S.lastScore.depart).slice(0, 10);
  let route = S.lastBody.route;
  if (S.picked.label !== "plan") route = { geojson: { type: "FeatureCollection", features: [{
    type: "Feature", properties: { name: "chosen" },
    geometry: { type: "LineString", coordinates: S.picked.drawn.line } }] } };
  const doc = await api("api/week", { route, date }, "Scoring the week");
  if (!doc) return;
  const hours = doc.hours;
  const risks = hours.map((h) => h.risk);
  let best = 0;
  hours.forEach((h, i) => { if (h.rule_breaks === 0 && (hours[best].rule_breaks > 0 || h.risk < hours[best].risk)) best = i; });
  barChart($("week-chart"), risks, {
    colour: (i) => (i === best ? "#2c7a4b" : (hours[i].rule_breaks ? "#c1121f" : "#5d7f8f")),
    label: (i) => DAYS[Math.floor(i / 24)] + " " + String(i % 24).padStart(2, "0") + ":00 · risk " +
      fmt(hours[i].risk) + (hours[i].rule_breaks ? " · breaks a rule" : ""),
    click: (i) => {
      $("depart-date").value = hours[i].depart.slice(0, 10);
      $("depart-time").value = hours[i].depart.slice(11, 16);
      showPane("route"); scoreRoute();
    },
  });
  const b = hours[best];
  $("week-best").textContent = "Least exposed start without a rule break: " +
    DAYS[Math.floor(best / 24)] + " " + b.depart.slice(11, 16) + " (risk " + fmt(b.risk) +
    "); red bars break a hard rule.";
}

/* ------------------------------------------------------------------ area */

function addVertex(latlng) {
  S.area.push([latlng.lng, latlng.lat]);
  S.areaMarkers.push(L.marker(latlng, { icon: L.divIcon({ className: "", iconSize: [10, 10],
    html: el("div", null, "vertex") }) }).addTo(map));
  drawAreaShape();
  $("btn-finish").disabled = S.area.length < 3;
}
function drawAreaShape() {
  if (S.areaShape) map.removeLayer(S.areaShape);
  S.areaShape = S.area.length ? L.polygon(S.area.map((p) => [p[1], p[0]]),
    { color: "#5b4b8a", weight: 2, fillOpacity: 0.08, interactive: false }).addTo(map) : null;
}
function clearArea() {
  S.area = []; for (const m of S.areaMarkers) map.removeLayer(m); S.areaMarkers = [];
  drawAreaShape(); S.drawing = false; areaFile = null;
  $("btn-draw").disabled = false; $("btn-finish").disabled = true;
}
let areaFile = null;
$("area-file").addEventListener("change", async (ev) => {
  const f = ev.target.files[0]; if (!f) return;
  clearArea(); areaFile = { name: f.name, text: await f.text() }; await reviewArea();
});

function whatIfs() {
  const out = [];
  for (const box of document.querySelectorAll("#rule-toggles input")) {
    if (!box.checked) out.push(["rule:" + box.dataset.rule + "=off"]);
  }
  const weights = [];
  for (const inp of document.querySelectorAll("#weight-inputs input")) {
    if (inp.value !== "") weights.push("weight:" + inp.dataset.cat + "=" + inp.value);
  }
  if (weights.length) out.push(weights);
  return out;
}

async function reviewArea() {
  let area;
  if (areaFile) area = { file: areaFile };
  else {
    if (S.area.length < 3) { showError("draw an area of at least three corners"); return; }
    const ring = [...S.area, S.area[0]];
    area = { type: "FeatureCollection", features: [{ type: "Feature",
      properties: { name: "drawn area" }, geometry: { type: "Polygon", coordinates: [ring] } }] };
  }
  const doc = await api("api/review", { area, what_if: whatIfs() }, "Reviewing the area");
  if (!doc) return;
  const a = doc.areas[0];
  $("area-result").hidden = false;
  $("area-km").textContent = fmt(a.network_km, 3);
  $("area-centre-km").textContent = fmt(a.centreline_km, 3);
  $("area-closed-peak").textContent = fmt(a.closed_peak.km, 3) + " km (" + a.closed_peak.label + ")";
  const c = a.connectivity.peak;
  $("area-parts").textContent = c.parts_count + (c.parts.length ? " (largest " + fmt(c.parts[0].km, 2) + " km)" : "");
  const bars = $("band-bars"); clear(bars);
  const top = Math.max(1e-9, ...Object.values(a.km_by_band));
  for (const b of S.info.bands) {
    const v = a.km_by_band[b.name] || 0;
    const row = el("div", null, "bar");
    row.appendChild(el("span", b.name, "name"));
    const fill = el("span", null, "fill");
    fill.style.width = Math.round(180 * v / top) + "px"; fill.style.background = b.colour;
    row.appendChild(fill); row.appendChild(el("span", fmt(v, 3) + " km", "val"));
    row.dataset.band = b.name;
    bars.appendChild(row);
  }
  barChart($("closed-chart"), a.closed_km_by_hour, {
    colour: () => "#8c2f39",
    label: (i) => DAYS[Math.floor(i / 24)] + " " + String(i % 24).padStart(2, "0") + ":00 · " +
      fmt(a.closed_km_by_hour[i], 3) + " km closed",
  });
  const wl = $("what-if-list"); clear(wl);
  if (!doc.what_if.length) wl.appendChild(el("li", "no what-if set (untick a rule or type a weight)"));
  for (const s of doc.what_if) {
    const x = s.areas[0];
    wl.appendChild(el("li", s.label + ": closed km-hours " + fmt(x.closed_km_hours, 2) + " (" +
      (x.closed_km_hours_change >= 0 ? "+" : "") + fmt(x.closed_km_hours_change, 2) +
      "), exposure " + fmt(x.exposure, 2) + " (" + (x.exposure_change >= 0 ? "+" : "") +
      fmt(x.exposure_change, 2) + ")"));
  }
}

/* ------------------------------------------------------------------ day plan */

$("plan-files").addEventListener("change", async (ev) => {
  S.planFiles = [];
  for (const f of ev.target.files) S.planFiles.push({ name: f.name, text: await f.text() });
  $("plan-files-list").textContent = S.planFiles.map((f) => f.name).join(", ");
});

async function planDay() {
  const runs = S.planFiles.find((f) => /\.(ya?ml|csv)$/i.test(f.name));
  if (!runs) { showError("open a runs file (.yaml or .csv) with its route files"); return; }
  const routes = S.planFiles.filter((f) => f !== runs);
  const doc = await api("api/plan", { runs, routes, date: $("plan-date").value,
    vehicles: Number($("plan-vehicles").value) }, "Planning the day");
  if (!doc) return;
  $("plan-result").hidden = false;
  $("plan-summary").textContent = "Plan for " + doc.date + ": total risk " + fmt(doc.total_risk) +
    " (each run at its earliest start: " + fmt(doc.naive_total_risk) + "); status " + doc.status;
  const tb = $("plan-rows"); clear(tb);
  for (const r of doc.runs) {
    const tr = el("tr");
    for (const v of [r.vehicle, r.start.slice(11, 16), r.end.slice(11, 16),
      r.name + " #" + r.repetition, r.route]) tr.appendChild(el("td", v));
    tr.appendChild(el("td", fmt(r.risk), "num"));
    tb.appendChild(tr);
  }
  const ul = $("plan-unplaced"); clear(ul);
  for (const u of doc.unplaced) ul.appendChild(el("li", "not placed: " + u.name + " #" + u.repetition + ": " + u.reason));
}

/* ------------------------------------------------------------------ compare */

function addCompare(s, label) {
  const key = s.name + "|" + s.depart + "|" + s.risk;
  if (S.compare.some((c) => c.key === key)) return;
  S.compare.push({ key, label, s });
  drawCompare();
}
function compareRows() { return [...S.compare].sort((a, b) => a.s.risk - b.s.risk); }
function drawCompare() {
  const tb = $("compare-rows"); clear(tb);
  compareRows().forEach((c, i) => {
    const s = c.s, tr = el("tr");
    tr.appendChild(el("td", i + 1));
    tr.appendChild(el("td", s.name));
    tr.appendChild(el("td", s.depart.slice(5, 16).replace("T", " ")));
    for (const [v, d] of [[s.length_km, 2], [s.duration_min, 1], [s.risk, 3], [s.risk_per_km, 3],
      [s.relative_index, 2]]) tr.appendChild(el("td", fmt(v, d), "num"));
    tr.appendChild(el("td", s.rule_breaks.length, "num"));
    tb.appendChild(tr);
  });
}
function csvCell(v) {
  let t = String(v);
  if (/^[=+\-@\t\r]/.test(t)) t = "'" + t;  // never a formula in a spreadsheet
  return /[",\n\r]/.test(t) ? '"' + t.replace(/"/g, '""') + '"' : t;
}
function compareCsv() {
  const head = ["rank", "name", "depart", "length_km", "duration_min", "risk", "risk_per_km",
    "relative_index", "rule_breaks"];
  const lines = ["# " + ($("caution").textContent || ""), "# " + $("provenance").textContent,
    head.join(",")];
  compareRows().forEach((c, i) => {
    const s = c.s;
    lines.push([i + 1, s.name, s.depart, s.length_km, s.duration_min, s.risk, s.risk_per_km,
      s.relative_index, s.rule_breaks.length].map(csvCell).join(","));
  });
  return lines.join("\n") + "\n";
}

/* ------------------------------------------------------------------ panes and start */

function currentPane() { const b = document.querySelector("#tabs button.on"); return b.dataset.pane; }
function showPane(name) {
  for (const b of document.querySelectorAll("#tabs button")) b.classList.toggle("on", b.dataset.pane === name);
  for (const p of document.querySelectorAll(".pane")) p.classList.toggle("on", p.id === "pane-" + name);
  if (name !== "area" && S.drawing) { S.drawing = false; $("btn-draw").disabled = false; }
}
for (const b of document.querySelectorAll("#tabs button")) b.addEventListener("click", () => showPane(b.dataset.pane));

$("btn-cancel").addEventListener("click", () => { if (S.busy) S.busy.abort(); });
$("btn-score").addEventListener("click", scoreRoute);
$("btn-clear").addEventListener("click", () => { S.points = []; routeFile = null; $("route-file").value = ""; redrawPoints(); routeLayer.clearLayers(); });
$("btn-alts").addEventListener("click", findAlternatives);
$("btn-export-geojson").addEventListener("click", () => exportRoute("geojson"));
$("btn-export-gpx").addEventListener("click", () => exportRoute("gpx"));
$("btn-draw").addEventListener("click", () => { clearArea(); S.drawing = true; $("btn-draw").disabled = true; });
$("btn-finish").addEventListener("click", () => { S.drawing = false; $("btn-draw").disabled = false; $("btn-finish").disabled = true; reviewArea(); });
$("btn-area-clear").addEventListener("click", clearArea);
$("btn-review").addEventListener("click", reviewArea);
$("btn-plan").addEventListener("click", planDay);
$("btn-compare-csv").addEventListener("click", () => download("compared-routes.csv", compareCsv(), "text/csv"));
$("btn-compare-clear").addEventListener("click", () => { S.compare = []; drawCompare(); });

function nextSchoolMorning() {
  const d = new Date(); d.setDate(d.getDate() + ((9 - d.getDay()) % 7 || 7));  // next Tuesday
  return d.toISOString().slice(0, 10);
}

(async function start() {
  const info = await api("api/info", undefined, "Loading the network");
  if (!info) return;
  S.info = info;
  $("caution").textContent = info.caution;
  $("data-licence").textContent = "Network " + (info.source_name || "") + ". " +
    (info.data_licence || "") + ". Leaflet: BSD-2-Clause, served from this machine.";
  $("tz-label").textContent = "local time " + info.timezone_label;
  $("depart-date").value = nextSchoolMorning(); $("depart-time").value = "08:00";
  $("plan-date").value = nextSchoolMorning();
  const [w, s, e, n] = info.bounds;
  map.fitBounds([[s, w], [n, e]]);
  const rt = $("rule-toggles");
  for (const r of info.rules) {
    const lab = el("label"); const box = el("input"); box.type = "checkbox"; box.checked = true;
    box.dataset.rule = r; lab.appendChild(box); lab.appendChild(document.createTextNode(" rule in force: " + r));
    rt.appendChild(lab);
  }
  const wi = $("weight-inputs");
  for (const c of info.categories) {
    const lab = el("label", c.label + " weight "); const inp = el("input");
    inp.type = "number"; inp.min = "0"; inp.step = "0.1"; inp.placeholder = "as is"; inp.dataset.cat = c.name;
    lab.appendChild(inp); wi.appendChild(lab);
  }
  loadNetwork();
  // later moves reload the layer for the new view (the first view is loaded above)
  map.on("moveend", () => { clearTimeout(netTimer); netTimer = setTimeout(loadNetwork, 150); });
})();
