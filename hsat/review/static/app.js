// hsat review page: night strip, signal lanes, event edits, rescoring and sign-off.
// Plain browser JavaScript; every byte of data comes from this study's local server.
"use strict";

const TOKEN = document.querySelector('meta[name="hsat-token"]').content;

const EVENT_STYLE = {
  obstructive_apnea: { colour: "#b8482f", tag: "obs apnea", short: "obs" },
  central_apnea: { colour: "#2f6fb8", tag: "central apnea", short: "cen" },
  mixed_apnea: { colour: "#7d4fb3", tag: "mixed apnea", short: "mix" },
  unclassified_apnea: { colour: "#6f6f6f", tag: "apnea (untyped)", short: "apn" },
  hypopnea: { colour: "#c98a1c", tag: "hypopnea", short: "hyp" },
  desaturation: { colour: "#23877a", tag: "desaturation", short: "desat" },
};
const LANE_STYLE = {
  flow_raw: { colour: "#6b7780", weight: 1.1 },
  flow: { colour: "#24476b", weight: 1.6 },
  thermal: { colour: "#41606f", weight: 1.1 },
  thorax: { colour: "#3f6e4f", weight: 1.0 },
  abdomen: { colour: "#7a5a2f", weight: 1.0 },
  spo2: { colour: "#a03a52", weight: 1.15 },
  pulse: { colour: "#5b4b8a", weight: 0.8 },
  position: { colour: "#44606e", weight: 0.55 },
  snore: { colour: "#857a35", weight: 0.7 },
};
const POSITION_COLOUR = ["#c4553f", "#4d8fb5", "#6aa56a", "#a079c2", "#d9b44a", "#bdbdbd"];
const RESPIRATORY_LANES = new Set(["flow_raw", "flow", "thermal", "thorax", "abdomen", "snore"]);
const SPANS = [30, 60, 120, 300, 600];
const GUTTER = 150;
const TOP = 20;
const BOTTOM = 22;

const S = {
  info: null, strip: null, events: [], pending: null, log: [],
  t0: 0, span: 120, win: null, winKey: "", seq: 0, cache: new Map(),
  selected: null, measure: null, mark: null, drag: null, closed: false,
  lastActivity: Date.now(),
};

// ---------------------------------------------------------------- server calls
async function api(path, body) {
  const opts = { headers: { "X-Review-Token": TOKEN } };
  if (body !== undefined) {
    opts.method = "POST";
    opts.headers["Content-Type"] = "application/json";
    opts.body = JSON.stringify(body);
  }
  const resp = await fetch("api/" + path, opts);
  let data = null;
  try { data = await resp.json(); } catch (e) { data = { error: resp.statusText }; }
  if (!resp.ok) throw new Error(data.error || resp.statusText);
  return data;
}

function say(text, isError) {
  const box = document.getElementById("message");
  box.textContent = text;
  box.className = isError ? "error" : "";
  box.hidden = false;
  clearTimeout(say.timer);
  say.timer = setTimeout(() => { box.hidden = true; }, isError ? 7000 : 3500);
}

// ---------------------------------------------------------------- time helpers
function startSecondOfDay() {
  const iso = (S.info && S.info.study && S.info.study.start_time) || "";
  const m = /T(\d{2}):(\d{2}):(\d{2})/.exec(iso);
  return m ? (+m[1]) * 3600 + (+m[2]) * 60 + (+m[3]) : 0;
}
function pad(n) { return String(Math.floor(n)).padStart(2, "0"); }
function clockAt(t) {
  const s = ((startSecondOfDay() + t) % 86400 + 86400) % 86400;
  return pad(s / 3600) + ":" + pad((s % 3600) / 60) + ":" + pad(s % 60);
}
function elapsed(t) {
  const s = Math.max(0, Math.round(t));
  return Math.floor(s / 3600) + "h" + pad((s % 3600) / 60) + "m" + pad(s % 60) + "s";
}
function fmt(x, digits) {
  return (x === null || x === undefined || Number.isNaN(+x)) ? "–" : (+x).toFixed(digits);
}
function sig(x) {
  return (x === null || x === undefined || Number.isNaN(+x)) ? "–" : String(+(+x).toPrecision(3));
}
function typeName(t) { return (EVENT_STYLE[t] || { tag: t }).tag; }
function reviewer() { return document.getElementById("reviewer").value.trim(); }

// ---------------------------------------------------------------- canvas helpers
function fitCanvas(canvas) {
  const dpr = window.devicePixelRatio || 1;
  const w = canvas.clientWidth, h = canvas.clientHeight;
  if (canvas.width !== Math.round(w * dpr) || canvas.height !== Math.round(h * dpr)) {
    canvas.width = Math.round(w * dpr);
    canvas.height = Math.round(h * dpr);
  }
  const ctx = canvas.getContext("2d");
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  return { ctx, w, h };
}
function plotWidth() {
  return Math.max(100, document.getElementById("traces").clientWidth - GUTTER - 10);
}
function xOf(t) { return GUTTER + (t - S.t0) / S.span * plotWidth(); }
function tOf(x) { return S.t0 + (x - GUTTER) / plotWidth() * S.span; }
function hexAlpha(hex, a) {
  const n = parseInt(hex.slice(1), 16);
  return `rgba(${(n >> 16) & 255},${(n >> 8) & 255},${n & 255},${a})`;
}

// ---------------------------------------------------------------- lanes layout
function laneBoxes(h) {
  const lanes = S.info.lanes;
  const total = lanes.reduce((a, l) => a + (LANE_STYLE[l.key] || { weight: 1 }).weight, 0);
  const usable = h - TOP - BOTTOM;
  let y = TOP;
  return lanes.map((l) => {
    const height = usable * (LANE_STYLE[l.key] || { weight: 1 }).weight / total;
    const box = { key: l.key, lane: l, y, h: height };
    y += height;
    return box;
  });
}

function laneValues(item) {
  const out = [];
  const push = (arr) => { for (const v of arr) if (v !== null) out.push(v); };
  if (item.raw) push(item.v); else { push(item.lo); push(item.hi); }
  return out;
}

function laneRange(key, item) {
  const vals = laneValues(item).sort((a, b) => a - b);
  if (!vals.length) return [0, 1];
  const q = (p) => vals[Math.min(vals.length - 1, Math.max(0, Math.round(p * (vals.length - 1))))];
  let lo = q(0.005), hi = q(0.995);
  if (key === "spo2") { lo = Math.min(Math.floor(vals[0]) - 1, 86); hi = 100.5; }
  else if (key === "pulse") { lo = Math.floor(vals[0] - 5); hi = Math.ceil(vals[vals.length - 1] + 5); }
  else if (key === "position") { lo = -0.5; hi = 5.5; }
  if (hi - lo < 1e-9) { lo -= 1; hi += 1; }
  const padding = key === "spo2" || key === "position" ? 0 : (hi - lo) * 0.08;
  return [lo - padding, hi + padding];
}

// ---------------------------------------------------------------- drawing: lanes
function drawTraces() {
  const canvas = document.getElementById("traces");
  const { ctx, w, h } = fitCanvas(canvas);
  ctx.clearRect(0, 0, w, h);
  if (!S.info) return;
  const boxes = laneBoxes(h);
  const t1 = S.t0 + S.span;
  drawPeriods(ctx, boxes, h);
  drawEvents(ctx, boxes, false);
  for (const box of boxes) drawLane(ctx, box, w);
  drawEvents(ctx, boxes, true);
  drawMeasure(ctx, boxes);
  if (S.mark) {
    const x0 = xOf(S.mark.t0), x1 = xOf(S.mark.t1);
    ctx.save();
    ctx.fillStyle = "rgba(45,93,123,0.12)";
    ctx.fillRect(x0, TOP, x1 - x0, h - TOP - BOTTOM);
    ctx.setLineDash([5, 3]);
    ctx.strokeStyle = "#2d5d7b";
    ctx.strokeRect(x0 + 0.5, TOP + 0.5, x1 - x0, h - TOP - BOTTOM - 1);
    ctx.restore();
  }
  drawTimeAxis(ctx, w, h, t1);
  document.getElementById("clock").textContent =
    `${clockAt(S.t0)} – ${clockAt(t1)}  (${elapsed(S.t0)})`;
}

function drawPeriods(ctx, boxes, h) {
  const spans = [...(S.info.wake || []).map((p) => ({ ...p, kind: "wake" })),
    ...(S.info.exclusions || []).map((p) => ({ ...p, kind: "excluded" }))];
  ctx.save();
  // labels of overlapping periods are set one after the other, right of the last lane's
  // scale value that sits in the same corner
  let free = GUTTER + 62;
  spans.sort((a, b) => a.start_s - b.start_s);
  for (const p of spans) {
    if (p.end_s < S.t0 || p.start_s > S.t0 + S.span) continue;
    const x0 = Math.max(GUTTER, xOf(p.start_s)), x1 = Math.min(GUTTER + plotWidth(), xOf(p.end_s));
    ctx.fillStyle = p.kind === "wake" ? "rgba(120,120,140,0.10)" : "rgba(90,90,90,0.13)";
    ctx.fillRect(x0, TOP, x1 - x0, h - TOP - BOTTOM);
    ctx.fillStyle = "#6d747a";
    ctx.font = "10px sans-serif";
    const label = p.kind + (p.reason ? ": " + p.reason : "");
    const lx = Math.max(x0 + 3, free);
    if (x1 - lx > 60) {
      const width = Math.min(ctx.measureText(label).width, x1 - lx - 6);
      ctx.save();
      ctx.beginPath(); ctx.rect(lx, h - BOTTOM - 14, width, 14); ctx.clip();
      ctx.fillText(label, lx, h - BOTTOM - 3);
      ctx.restore();
      free = lx + width + 12;
    }
  }
  ctx.restore();
}

function drawLane(ctx, box, w) {
  const item = S.win && S.win.lanes[box.key];
  const style = LANE_STYLE[box.key] || { colour: "#333" };
  const right = GUTTER + plotWidth();
  ctx.save();
  ctx.strokeStyle = "#e4dccb";
  ctx.beginPath(); ctx.moveTo(0, box.y + box.h + 0.5); ctx.lineTo(w, box.y + box.h + 0.5); ctx.stroke();
  ctx.fillStyle = "#1e2a33";
  ctx.font = "bold 11px sans-serif";
  ctx.fillText(box.lane.caption, 6, box.y + 13);
  ctx.font = "10px sans-serif";
  ctx.fillStyle = "#6d747a";
  ctx.fillText(`${box.lane.label}${box.lane.unit ? " · " + box.lane.unit : ""}`, 6, box.y + 25);
  if (!item) { ctx.restore(); return; }
  for (const [a, b] of item.invalid) {
    const x0 = Math.max(GUTTER, xOf(a)), x1 = Math.min(right, xOf(b));
    if (x1 <= x0) continue;
    ctx.fillStyle = "rgba(164,55,42,0.08)";
    ctx.fillRect(x0, box.y + 1, x1 - x0, box.h - 2);
    ctx.fillStyle = "#a4372a";
    ctx.fillRect(x0, box.y + box.h - 3, x1 - x0, 2);
  }
  const [lo, hi] = laneRange(box.key, item);
  box.range = [lo, hi];
  const yOf = (v) => box.y + box.h - 3 - (v - lo) / (hi - lo) * (box.h - 6);
  box.yOf = yOf;
  if (box.key !== "position") {
    ctx.fillStyle = "#8a8f93";
    ctx.font = "9px sans-serif";
    const digits = box.key === "spo2" || box.key === "pulse" ? 0 : 2;
    ctx.fillText(fmt(box.key === "spo2" ? Math.min(hi, 100) : hi, digits), GUTTER + 3, box.y + 10);
    ctx.fillText(fmt(lo, digits), GUTTER + 3, box.y + box.h - 3);
  }
  ctx.beginPath(); ctx.rect(GUTTER, box.y, plotWidth(), box.h); ctx.clip();
  if (box.key === "position") { drawPositionLane(ctx, box, item); ctx.restore(); return; }
  ctx.strokeStyle = style.colour;
  ctx.lineWidth = 1;
  ctx.beginPath();
  let pen = false;
  if (item.raw) {
    for (let i = 0; i < item.t.length; i++) {
      const v = item.v[i];
      if (v === null) { pen = false; continue; }
      const x = xOf(item.t[i]), y = yOf(v);
      if (pen) ctx.lineTo(x, y); else { ctx.moveTo(x, y); pen = true; }
    }
  } else {
    for (let i = 0; i < item.t.length; i++) {
      const a = item.lo[i], b = item.hi[i];
      if (a === null || b === null) { pen = false; continue; }
      const x = xOf(item.t[i]);
      const first = i % 2 ? yOf(b) : yOf(a), second = i % 2 ? yOf(a) : yOf(b);
      if (pen) ctx.lineTo(x, first); else { ctx.moveTo(x, first); pen = true; }
      ctx.lineTo(x, second);
    }
  }
  ctx.stroke();
  ctx.restore();
}

function drawPositionLane(ctx, box, item) {
  const names = (S.strip && S.strip.position_names) || [];
  const vals = item.raw ? item.v : item.hi;
  ctx.font = "10px sans-serif";
  let runStart = 0;
  for (let i = 1; i <= item.t.length; i++) {
    if (i < item.t.length && vals[i] === vals[runStart]) continue;
    const code = vals[runStart];
    const x0 = Math.max(GUTTER, xOf(item.t[runStart]));
    const x1 = i < item.t.length ? xOf(item.t[i]) : GUTTER + plotWidth();
    if (code !== null) {
      ctx.fillStyle = hexAlpha(POSITION_COLOUR[code] || "#999999", 0.55);
      ctx.fillRect(x0, box.y + 3, x1 - x0, box.h - 6);
      if (x1 - x0 > 40) {
        ctx.fillStyle = "#1e2a33";
        ctx.fillText(names[code] || String(code), x0 + 4, box.y + box.h / 2 + 4);
      }
    }
    runStart = i;
  }
}

function visibleEvents() {
  const t1 = S.t0 + S.span;
  return S.events.filter((e) => e.onset_s + e.duration_s >= S.t0 && e.onset_s <= t1);
}

function eventBounds(e) {
  if (S.drag && S.drag.kind === "edge" && S.drag.id === e.event_id) {
    return [S.drag.onset, S.drag.end];
  }
  return [e.onset_s, e.onset_s + e.duration_s];
}

function drawEvents(ctx, boxes, overlay) {
  const resp = boxes.filter((b) => RESPIRATORY_LANES.has(b.key));
  const spo2 = boxes.find((b) => b.key === "spo2");
  const area = (lanes) => lanes.length ? [lanes[0].y, lanes[lanes.length - 1].y + lanes[lanes.length - 1].h] : null;
  const respArea = area(resp.filter((b) => b.key !== "snore")) || area(resp);
  ctx.save();
  for (const e of visibleEvents()) {
    const band = e.event === "desaturation" ? (spo2 ? [spo2.y, spo2.y + spo2.h] : null) : respArea;
    if (!band) continue;
    const [a, b] = eventBounds(e);
    const x0 = xOf(a), x1 = xOf(b);
    const style = EVENT_STYLE[e.event] || { colour: "#777777", tag: e.event, short: e.event };
    const rejected = e.status === "rejected";
    const colour = rejected ? "#8a8a8a" : style.colour;
    const selected = S.selected === e.event_id;
    if (!overlay) {
      ctx.fillStyle = hexAlpha(colour, rejected ? 0.07 : 0.16);
      ctx.fillRect(x0, band[0], x1 - x0, band[1] - band[0]);
      continue;
    }
    ctx.fillStyle = colour;
    ctx.fillRect(x0, band[0] === spo2?.y ? band[0] : TOP - 14, x1 - x0, 3);
    const label = (x1 - x0 > ctx.measureText(style.tag).width + 8) ? style.tag : style.short;
    ctx.font = (selected ? "bold " : "") + "11px sans-serif";
    const ly = e.event === "desaturation" ? band[0] + 12 : TOP - 3;
    ctx.fillText(rejected ? label + " ✕" : (e.status === "added" ? label + " +" : label), x0 + 2, ly);
    if (rejected) {
      ctx.strokeStyle = "#8a8a8a";
      ctx.beginPath(); ctx.moveTo(x0, band[0]); ctx.lineTo(x1, band[1]); ctx.stroke();
    }
    if (e.status === "added") {
      ctx.setLineDash([4, 3]);
      ctx.strokeStyle = colour;
      ctx.strokeRect(x0 + 0.5, band[0] + 0.5, x1 - x0 - 1, band[1] - band[0] - 1);
      ctx.setLineDash([]);
    }
    if (selected) {
      ctx.lineWidth = 2;
      ctx.strokeStyle = "#1e2a33";
      ctx.strokeRect(x0, band[0], x1 - x0, band[1] - band[0]);
      ctx.fillStyle = "#1e2a33";
      for (const x of [x0, x1]) ctx.fillRect(x - 3, (band[0] + band[1]) / 2 - 12, 6, 24);
      ctx.lineWidth = 1;
    }
  }
  ctx.restore();
}

function laneMiddle(box, t0, t1) {
  const item = S.win && S.win.lanes[box.key];
  if (!item) return 0;
  const vals = [];
  for (let i = 0; i < item.t.length; i++) {
    if (item.t[i] < t0 || item.t[i] > t1) continue;
    const v = item.raw ? item.v[i] : (item.lo[i] !== null && item.hi[i] !== null ? (item.lo[i] + item.hi[i]) / 2 : null);
    if (v !== null) vals.push(v);
  }
  if (!vals.length) return 0;
  vals.sort((a, b) => a - b);
  return vals[Math.floor(vals.length / 2)];
}

function drawMeasure(ctx, boxes) {
  const e = S.events.find((x) => x.event_id === S.selected);
  const m = S.measure && S.measure.event_id === S.selected && S.measure.measures[0];
  if (!e || !m) return;
  ctx.save();
  ctx.setLineDash([6, 4]);
  ctx.lineWidth = 1.2;
  const box = boxes.find((b) => b.key === m.channel);
  if (box && box.yOf && m.baseline !== null) {
    const mid = laneMiddle(box, m.baseline_from_s, e.onset_s);
    const xb0 = Math.max(GUTTER, xOf(m.baseline_from_s)), xb1 = xOf(e.onset_s);
    const xe1 = xOf(e.onset_s + e.duration_s);
    ctx.strokeStyle = "#1e2a33";
    for (const s of [1, -1]) {
      ctx.beginPath();
      ctx.moveTo(xb0, box.yOf(mid + s * m.baseline / 2)); ctx.lineTo(xb1, box.yOf(mid + s * m.baseline / 2));
      ctx.stroke();
    }
    ctx.strokeStyle = "#b8482f";
    for (const s of [1, -1]) {
      ctx.beginPath();
      ctx.moveTo(xb1, box.yOf(mid + s * m.excursion / 2)); ctx.lineTo(xe1, box.yOf(mid + s * m.excursion / 2));
      ctx.stroke();
    }
    ctx.setLineDash([]);
    ctx.fillStyle = "#1e2a33";
    ctx.font = "11px sans-serif";
    ctx.fillText(`baseline ${sig(m.baseline)}`, Math.max(GUTTER + 2, xb1 - 110), box.y + box.h - 6);
    ctx.fillStyle = "#b8482f";
    ctx.fillText(`drop ${fmt(m.drop_pct, 0)} %`, xb1 + 4, box.y + box.h - 6);
    ctx.setLineDash([6, 4]);
  }
  const spo2 = boxes.find((b) => b.key === "spo2");
  if (spo2 && spo2.yOf && m.spo2_baseline !== null && m.spo2_baseline !== undefined) {
    ctx.strokeStyle = "#1e2a33";
    ctx.beginPath();
    ctx.moveTo(Math.max(GUTTER, xOf(m.spo2_from_s)), spo2.yOf(m.spo2_baseline));
    ctx.lineTo(xOf(e.onset_s), spo2.yOf(m.spo2_baseline));
    ctx.stroke();
    if (m.spo2_nadir !== null) {
      ctx.strokeStyle = "#a03a52";
      ctx.beginPath();
      ctx.moveTo(xOf(e.onset_s), spo2.yOf(m.spo2_nadir));
      ctx.lineTo(xOf(m.spo2_to_s), spo2.yOf(m.spo2_nadir));
      ctx.stroke();
      ctx.setLineDash([]);
      ctx.fillStyle = "#a03a52";
      ctx.font = "11px sans-serif";
      ctx.fillText(`${fmt(m.spo2_baseline, 0)} → ${fmt(m.spo2_nadir, 0)} (−${fmt(m.spo2_drop, 0)})`,
        xOf(e.onset_s) + 4, spo2.yOf(m.spo2_nadir) + 12);
    }
  }
  ctx.restore();
}

function niceStep(span) {
  for (const s of [1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 1800, 3600]) if (span / s <= 10) return s;
  return 7200;
}

function drawTimeAxis(ctx, w, h, t1) {
  const step = niceStep(S.span);
  ctx.save();
  ctx.strokeStyle = "rgba(30,42,51,0.10)";
  ctx.fillStyle = "#6d747a";
  ctx.font = "10px sans-serif";
  for (let t = Math.ceil(S.t0 / step) * step; t <= t1; t += step) {
    const x = Math.round(xOf(t)) + 0.5;
    ctx.beginPath(); ctx.moveTo(x, TOP); ctx.lineTo(x, h - BOTTOM); ctx.stroke();
    if (x + 24 < w) ctx.fillText(clockAt(t), x - 22, h - 7);
  }
  ctx.restore();
}

// ---------------------------------------------------------------- drawing: night strip
function drawNight() {
  const canvas = document.getElementById("night");
  const { ctx, w, h } = fitCanvas(canvas);
  ctx.clearRect(0, 0, w, h);
  if (!S.info || !S.strip) return;
  const night = S.info.night_s, left = 52, right = w - 8, pw = right - left;
  const x = (t) => left + t / night * pw;
  const st = S.strip, step = st.step_s;
  const top = 18, bottom = 84, posTop = 88, posH = 12;
  ctx.font = "10px sans-serif";
  ctx.fillStyle = "#6d747a";
  ctx.fillText("events", 4, 12);
  ctx.fillText("SpO2", 4, top + 12);
  ctx.fillText("pulse", 4, bottom - 4);
  ctx.fillText("position", 4, posTop + 10);
  if (st.analysed) {
    ctx.fillStyle = "rgba(90,90,90,0.12)";
    st.analysed.forEach((a, i) => { if (a === null || a < 0.5) ctx.fillRect(x(i * step), top, pw * step / night + 0.5, bottom - top); });
  }
  const line = (values, lo, hi, colour, width) => {
    if (!values) return;
    ctx.strokeStyle = colour; ctx.lineWidth = width; ctx.beginPath();
    let pen = false;
    values.forEach((v, i) => {
      if (v === null) { pen = false; return; }
      const px = x((i + 0.5) * step), py = bottom - (Math.min(hi, Math.max(lo, v)) - lo) / (hi - lo) * (bottom - top);
      if (pen) ctx.lineTo(px, py); else { ctx.moveTo(px, py); pen = true; }
    });
    ctx.stroke();
  };
  line(st.pulse_mean, 30, 130, "rgba(91,75,138,0.55)", 1);
  line(st.spo2_low, 70, 100, "rgba(160,58,82,0.35)", 1);
  line(st.spo2_mean, 70, 100, "#a03a52", 1.4);
  ctx.fillStyle = "#6d747a";
  ctx.fillText("100", right - 18, top + 9);
  ctx.fillText("70", right - 14, bottom - 2);
  if (st.position) {
    st.position.forEach((code, i) => {
      if (code < 0) return;
      ctx.fillStyle = hexAlpha(POSITION_COLOUR[code] || "#999999", 0.7);
      ctx.fillRect(x(i * step), posTop, pw * step / night + 0.5, posH);
    });
  }
  for (const e of S.events) {
    if (e.status === "rejected") continue;
    const style = EVENT_STYLE[e.event] || { colour: "#777777" };
    ctx.fillStyle = style.colour;
    const ex = x(e.onset_s);
    if (e.event === "desaturation") ctx.fillRect(ex, 10, 1.2, 5); else ctx.fillRect(ex, 2, 1.2, 8);
  }
  ctx.strokeStyle = "#1e2a33"; ctx.lineWidth = 1.5;
  ctx.strokeRect(x(S.t0), 1, Math.max(3, S.span / night * pw), posTop + posH);
  ctx.fillStyle = "#6d747a"; ctx.lineWidth = 1;
  for (let t = 0; t <= night; t += 3600) {
    ctx.fillRect(x(t), posTop + posH + 1, 1, 4);
    ctx.fillText(clockAt(t).slice(0, 5), x(t) - 12, posTop + posH + 14);
  }
  // position legend
  const names = st.position_names || [];
  let lx = left;
  names.forEach((n, i) => {
    if (lx > right - 60) return;
    ctx.fillStyle = hexAlpha(POSITION_COLOUR[i], 0.7); ctx.fillRect(lx, h - 10, 8, 8);
    ctx.fillStyle = "#6d747a"; ctx.fillText(n, lx + 11, h - 2); lx += ctx.measureText(n).width + 26;
  });
}

// ---------------------------------------------------------------- window fetching
function clampStart(t) {
  const night = S.info ? S.info.night_s : 0;
  return Math.max(0, Math.min(t, Math.max(0, night - S.span)));
}
function windowKey(t0, span, px) { return `${t0.toFixed(2)}|${span}|${px}`; }

async function fetchWindow(t0, span, px) {
  const key = windowKey(t0, span, px);
  if (S.cache.has(key)) return S.cache.get(key);
  const promise = api(`window?t0=${t0.toFixed(3)}&t1=${(t0 + span).toFixed(3)}&px=${px}`);
  S.cache.set(key, promise);
  if (S.cache.size > 12) S.cache.delete(S.cache.keys().next().value);
  promise.catch(() => S.cache.delete(key));
  return promise;
}

async function showWindow(t0) {
  S.t0 = clampStart(t0);
  const px = Math.round(plotWidth());
  const seq = ++S.seq;
  drawTraces();
  drawNight();
  const busy = document.getElementById("busy");
  busy.hidden = false;
  try {
    const win = await fetchWindow(S.t0, S.span, px);
    if (seq !== S.seq) return;
    S.win = win;
    S.winKey = windowKey(S.t0, S.span, px);
    drawTraces();
    busy.hidden = true;
    document.getElementById("traces").dataset.windowStart = String(S.t0);
    // Paging should feel immediate: ask for the neighbours while the reviewer reads.
    fetchWindow(clampStart(S.t0 + S.span), S.span, px);
    fetchWindow(clampStart(S.t0 - S.span), S.span, px);
  } catch (err) {
    busy.hidden = true;
    say("Could not load the signals: " + err.message, true);
  }
}

// ---------------------------------------------------------------- events and edits
function setEvents(resp) {
  S.events = resp.events;
  S.pending = resp.pending;
  S.log = resp.log || S.log;
  renderCounts();
  renderEditList();
  renderSelected();
  drawTraces();
  drawNight();
}

function selectedEvent() { return S.events.find((e) => e.event_id === S.selected) || null; }

async function selectEvent(id, centre) {
  S.selected = id;
  S.measure = null;
  const e = selectedEvent();
  if (e && centre) {
    const mid = e.onset_s + e.duration_s / 2;
    if (mid < S.t0 + S.span * 0.1 || mid > S.t0 + S.span * 0.9) await showWindow(mid - S.span / 2);
  }
  renderSelected();
  drawTraces();
  if (!e) return;
  try {
    const m = await api(`measure?id=${encodeURIComponent(id)}`);
    if (S.selected !== id) return;
    S.measure = m;
    renderSelected();
    drawTraces();
  } catch (err) {
    say("Could not measure the event: " + err.message, true);
  }
}

function renderSelected() {
  const e = selectedEvent();
  document.getElementById("event-none").hidden = !!e;
  document.getElementById("event-detail").hidden = !e;
  if (!e) return;
  const title = document.getElementById("event-title");
  title.innerHTML = "";
  title.append(typeName(e.event));
  const badge = document.createElement("span");
  badge.className = "status " + e.status;
  badge.textContent = e.status === "auto" ? "automatic" : e.status;
  title.append(badge);
  const facts = [
    ["id", e.event_id],
    ["start", `${clockAt(e.onset_s)} (${elapsed(e.onset_s)})`],
    ["duration", `${fmt(e.duration_s, 1)} s`],
    ["rule sets", e.rule_sets.join(", ")],
  ];
  if (e.auto && (e.retyped || e.adjusted)) {
    facts.push(["automatic", `${typeName(e.auto.event)} at ${clockAt(+e.auto.onset_s)} for ${fmt(e.auto.duration_s, 1)} s`]);
  }
  const scored = e.scored || {};
  if (scored.sensor) facts.push(["scored on", scored.sensor]);
  if (scored.position) facts.push(["position", scored.position]);
  if (scored.desat_pct) facts.push(["scored desat", `${fmt(scored.desat_pct, 1)} points`]);
  if (scored.min_amplitude_ratio) facts.push(["scored ratio", fmt(scored.min_amplitude_ratio, 2)]);
  const dl = document.getElementById("event-facts");
  dl.innerHTML = "";
  for (const [k, v] of facts) {
    const dt = document.createElement("dt"); dt.textContent = k;
    const dd = document.createElement("dd"); dd.textContent = v;
    dl.append(dt, dd);
  }
  const box = document.getElementById("event-measure");
  if (S.measure && S.measure.event_id === e.event_id) {
    box.textContent = S.measure.measures.map((m) => {
      const lines = [`${m.rule_set} · ${m.source === "scored" ? "as scored" : "estimated for this span"}`];
      if (m.channel) lines.push(`${m.channel}: baseline ${sig(m.baseline)}, in event ${sig(m.excursion)}, drop ${fmt(m.drop_pct, 0)} %`);
      if (m.spo2_baseline !== undefined) lines.push(`SpO2 ${fmt(m.spo2_baseline, 0)} → ${fmt(m.spo2_nadir, 0)} %: drop ${fmt(m.spo2_drop, 0)} points`);
      return lines.join("\n");
    }).join("\n");
  } else {
    box.textContent = "measuring…";
  }
  // Reset the type choice only when another event (or a new type) is shown, so that a
  // measurement arriving late does not undo what the reviewer just picked.
  const shownKey = e.event_id + "|" + e.event;
  if (S.retypeFor !== shownKey) {
    document.getElementById("retype-select").value = e.event;
    S.retypeFor = shownKey;
  }
  document.getElementById("btn-reject").disabled = e.status === "rejected";
  document.getElementById("btn-retype").disabled = e.status === "rejected";
  document.getElementById("btn-keep").textContent = e.status === "rejected" ? "Restore" : "Keep";
}

async function sendEdit(body) {
  const name = reviewer();
  if (!name) { say("Type your name under Reviewer first.", true); document.getElementById("reviewer").focus(); return null; }
  try {
    const resp = await api("edit", { ...body, reviewer: name });
    setEvents(resp);
    return resp;
  } catch (err) {
    say("Edit refused: " + err.message, true);
    return null;
  }
}

async function editSelected(action, extra) {
  const e = selectedEvent();
  if (!e) { say("Select an event first.", true); return; }
  const resp = await sendEdit({ action, event_id: e.event_id, ...(extra || {}) });
  if (resp) { say(`${action}: ${typeName(resp.entry.after.event)} at ${clockAt(e.onset_s)}`); selectEvent(e.event_id, false); }
}

async function addMarked() {
  if (!S.mark) return;
  const type = document.getElementById("add-type").value;
  const ruleSets = [...document.querySelectorAll("#span-rule-sets input:checked")].map((el) => el.value);
  if (!ruleSets.length) { say("Tick at least one rule set the event counts under.", true); return; }
  const resp = await sendEdit({ action: "add", event: type, rule_sets: ruleSets, onset_s: +S.mark.t0.toFixed(2), duration_s: +(S.mark.t1 - S.mark.t0).toFixed(2) });
  if (resp) {
    S.mark = null;
    document.getElementById("span-card").hidden = true;
    say(`added ${typeName(type)} at ${clockAt(resp.entry.after.onset_s)}`);
    selectEvent(resp.entry.event_id, false);
  }
}

function jumpMatches(e) {
  const want = document.getElementById("jump-type").value;
  if (want === "any") return e.event !== "desaturation";
  if (want === "changed") return e.status !== "auto";
  return e.event === want;
}

function jump(direction) {
  const cur = selectedEvent();
  const ref = cur ? cur.onset_s : S.t0 + S.span / 2;
  const list = S.events.filter(jumpMatches);
  const found = direction > 0 ? list.find((e) => e.onset_s > ref + 0.01)
    : [...list].reverse().find((e) => e.onset_s < ref - 0.01);
  if (!found) { say(direction > 0 ? "No later event of that kind." : "No earlier event of that kind."); return; }
  selectEvent(found.event_id, true);
}

// ---------------------------------------------------------------- header, counts, log
function renderChips() {
  const box = document.getElementById("index-chips");
  box.innerHTML = "";
  for (const rs of S.info.rule_sets) {
    const now = (S.info.indices || {})[rs] || {};
    const auto = (S.info.auto_indices || {})[rs] || {};
    const chip = document.createElement("span");
    chip.className = "chip";
    chip.dataset.ruleSet = rs;
    chip.append(`${rs}  REI `);
    const b = document.createElement("b");
    b.className = "rei";
    b.textContent = fmt(now.rei, 1);
    chip.append(b);
    chip.append(` /h · ${now.severity || ""}`);
    if (S.info.review && auto.rei !== undefined && auto.rei !== now.rei) {
      const was = document.createElement("span");
      was.className = "was";
      was.textContent = `automatic ${fmt(auto.rei, 1)}`;
      chip.append(was);
    }
    box.append(chip);
  }
}

function renderCounts() {
  const p = S.pending;
  const r = S.info && S.info.review;
  const counts = document.getElementById("review-counts");
  if (p) {
    counts.textContent = `${p.edited_count} event(s) edited: ${p.rejected} rejected, ${p.added} added, ${p.retyped} retyped, ${p.adjusted} moved`;
  }
  const stale = p && (!r || (r.log_entries || 0) < p.log_entries) && p.log_entries > 0;
  const note = document.getElementById("pending-note");
  note.textContent = stale ? "edits not yet in the indices" : (r && r.reviewed ? `reviewed · ${r.edited_count} edited` : "");
  note.dataset.stale = stale ? "1" : "0";
}

function renderEditList() {
  const list = document.getElementById("edit-list");
  list.innerHTML = "";
  for (const x of [...S.log].reverse().slice(0, 40)) {
    const li = document.createElement("li");
    const what = x.action === "confirm" ? "confirmed the table" : `${x.action} ${x.event_id} (${typeName((x.after || x.before || {}).event)})`;
    li.textContent = `${(x.at || "").slice(11, 19)} ${x.reviewer}: ${what}`;
    list.append(li);
  }
}

function renderFacts() {
  const st = S.info.study || {};
  const p = S.info.patient || {};
  const who = [p.code, p.name].filter(Boolean).join(" · ") || "patient not named";
  const mt = S.info.monitoring_time_h;
  document.getElementById("study-facts").textContent =
    `${who} · ${(st.start_time || "").replace("T", " ").slice(0, 16)} · monitored ${fmt(mt, 1)} h`;
}

async function rescore() {
  const name = reviewer();
  if (!name) { say("Type your name under Reviewer first.", true); return; }
  const btn = document.getElementById("btn-rescore");
  btn.disabled = true;
  try {
    const resp = await api("rescore", { reviewer: name });
    S.info.indices = resp.indices;
    S.info.review = resp.review;
    const ev = await api("events");
    setEvents(ev);
    renderChips();
    renderCounts();
    const first = S.info.rule_sets[0];
    say(`Indices recomputed: ${first} REI ${fmt((resp.indices[first] || {}).rei, 1)} /h`);
  } catch (err) {
    say("Rescoring failed: " + err.message, true);
  } finally {
    btn.disabled = false;
  }
}

async function sign() {
  const physician = document.getElementById("physician").value.trim();
  const text = document.getElementById("interpretation").value;
  if (!physician) { say("Type the signing physician's name and credentials.", true); return; }
  if (!text.trim()) { say("Write the interpretation before signing.", true); return; }
  if (document.getElementById("pending-note").dataset.stale === "1") {
    say("Recompute the indices first: some edits are not in them yet.", true); return;
  }
  const btn = document.getElementById("btn-sign");
  btn.disabled = true;
  try {
    const reasonBox = document.getElementById("amend-reason");
    const resp = await api("sign", {
      physician, interpretation: text,
      acknowledge_inadequate: document.getElementById("ack-inadequate").checked,
      reason: reasonBox.hidden ? "" : reasonBox.value,
    });
    reasonBox.hidden = false;
    reasonBox.value = "";
    const out = document.getElementById("sign-result");
    out.innerHTML = "";
    out.append(`Signed: version ${resp.version}. `);
    const a = document.createElement("a");
    a.href = `api/file?name=${encodeURIComponent(resp.report)}&token=${encodeURIComponent(TOKEN)}`;
    a.target = "_blank";
    a.rel = "noopener";
    a.id = "signed-link";
    a.textContent = resp.report;
    out.append(a);
    say(`Report signed as ${resp.report}`);
  } catch (err) {
    say("Signing failed: " + err.message, true);
  } finally {
    btn.disabled = false;
  }
}

async function finish() {
  try { await api("close", {}); } catch (e) { /* already stopped */ }
  S.closed = true;
  document.querySelectorAll("button, select, input, textarea").forEach((el) => { el.disabled = true; });
  say("The review server has stopped. You can close this tab.");
}

// ---------------------------------------------------------------- mouse and keys
function hitEvent(x, y) {
  const boxes = laneBoxes(document.getElementById("traces").clientHeight);
  const spo2 = boxes.find((b) => b.key === "spo2");
  const inSpo2 = spo2 && y >= spo2.y && y <= spo2.y + spo2.h;
  const t = tOf(x);
  const hits = visibleEvents().filter((e) => t >= e.onset_s && t <= e.onset_s + e.duration_s
    && (e.event === "desaturation") === !!inSpo2);
  hits.sort((a, b) => a.duration_s - b.duration_s);
  return hits[0] || null;
}

function onMouseDown(ev) {
  if (!S.info || ev.button !== 0) return;
  const x = ev.offsetX;
  if (x < GUTTER) return;
  const e = selectedEvent();
  if (e && e.status !== "rejected") {
    const x0 = xOf(e.onset_s), x1 = xOf(e.onset_s + e.duration_s);
    const near = Math.abs(x - x0) <= 6 ? "start" : (Math.abs(x - x1) <= 6 ? "end" : null);
    if (near) {
      S.drag = { kind: "edge", id: e.event_id, edge: near, onset: e.onset_s, end: e.onset_s + e.duration_s };
      return;
    }
  }
  S.drag = { kind: "mark", x0: x, moved: false };
}

function onMouseMove(ev) {
  const canvas = document.getElementById("traces");
  if (!S.drag) {
    const e = selectedEvent();
    const near = e && (Math.abs(ev.offsetX - xOf(e.onset_s)) <= 6 || Math.abs(ev.offsetX - xOf(e.onset_s + e.duration_s)) <= 6);
    canvas.style.cursor = near ? "ew-resize" : "crosshair";
    return;
  }
  const t = Math.max(0, Math.min(S.info.night_s, tOf(Math.max(GUTTER, ev.offsetX))));
  if (S.drag.kind === "edge") {
    if (S.drag.edge === "start") S.drag.onset = Math.min(t, S.drag.end - 1);
    else S.drag.end = Math.max(t, S.drag.onset + 1);
  } else {
    if (Math.abs(ev.offsetX - S.drag.x0) > 4) S.drag.moved = true;
    if (S.drag.moved) {
      const a = tOf(S.drag.x0);
      S.mark = { t0: Math.max(0, Math.min(a, t)), t1: Math.min(S.info.night_s, Math.max(a, t)) };
    }
  }
  drawTraces();
}

async function onMouseUp(ev) {
  const drag = S.drag;
  S.drag = null;
  if (!drag) return;
  if (drag.kind === "edge") {
    const e = selectedEvent();
    if (e && (Math.abs(drag.onset - e.onset_s) > 0.05 || Math.abs(drag.end - e.onset_s - e.duration_s) > 0.05)) {
      await editSelected("adjust", { onset_s: +drag.onset.toFixed(2), duration_s: +(drag.end - drag.onset).toFixed(2) });
    }
    drawTraces();
    return;
  }
  if (!drag.moved) {
    const hit = hitEvent(ev.offsetX, ev.offsetY);
    S.mark = null;
    document.getElementById("span-card").hidden = true;
    selectEvent(hit ? hit.event_id : null, false);
    return;
  }
  const m = S.mark;
  document.getElementById("span-card").hidden = false;
  document.getElementById("span-facts").textContent =
    `${clockAt(m.t0)} to ${clockAt(m.t1)} · ${fmt(m.t1 - m.t0, 1)} s`;
  drawTraces();
}

function onKey(ev) {
  S.lastActivity = Date.now();
  const tag = (ev.target.tagName || "").toLowerCase();
  if (tag === "input" || tag === "textarea" || tag === "select" || S.closed || !S.info) return;
  const k = ev.key;
  if (k === "ArrowRight" || k === "PageDown") showWindow(S.t0 + (ev.shiftKey ? S.span / 2 : S.span));
  else if (k === "ArrowLeft" || k === "PageUp") showWindow(S.t0 - (ev.shiftKey ? S.span / 2 : S.span));
  else if (k === "n" || k === "N") jump(1);
  else if (k === "p" || k === "P") jump(-1);
  else if (k === "k" || k === "K") editSelected("accept");
  else if (k === "r" || k === "R" || k === "Delete") editSelected("reject");
  else if (k === "+" || k === "=") changeSpan(1);
  else if (k === "-") changeSpan(-1);
  else if (k === "Escape") { S.mark = null; document.getElementById("span-card").hidden = true; selectEvent(null, false); }
  else return;
  ev.preventDefault();
}

function changeSpan(direction) {
  const i = SPANS.indexOf(S.span);
  const next = SPANS[Math.max(0, Math.min(SPANS.length - 1, i + direction))];
  setSpan(next);
}

function setSpan(span) {
  const centre = S.t0 + S.span / 2;
  S.span = span;
  document.getElementById("span-select").value = String(span);
  showWindow(centre - span / 2);
}

function onNightClick(ev) {
  if (!S.info) return;
  const canvas = document.getElementById("night");
  const left = 52, pw = canvas.clientWidth - 8 - left;
  const t = (ev.offsetX - left) / pw * S.info.night_s;
  showWindow(t - S.span / 2);
}

// ---------------------------------------------------------------- start
function fillTypeSelects() {
  const jumpSel = document.getElementById("jump-type");
  const opts = [["any", "any apnea or hypopnea"], ...S.info.event_types.map((t) => [t, typeName(t)]), ["changed", "edited events"]];
  for (const [v, text] of opts) jumpSel.append(new Option(text, v));
  for (const id of ["retype-select", "add-type"]) {
    const sel = document.getElementById(id);
    for (const t of S.info.event_types) sel.append(new Option(typeName(t), t));
  }
  document.getElementById("add-type").value = "hypopnea";
  const box = document.getElementById("span-rule-sets");
  for (const rs of S.info.rule_sets) {
    const label = document.createElement("label");
    label.className = "check";
    const tick = document.createElement("input");
    tick.type = "checkbox"; tick.value = rs; tick.checked = true;
    label.append(tick, " " + rs);
    box.append(label);
  }
}

async function start() {
  try {
    S.info = await api("study");
  } catch (err) {
    say("Could not open the study: " + err.message, true);
    return;
  }
  const stored = window.localStorage && localStorage.getItem("hsat-reviewer");
  document.getElementById("reviewer").value = stored || S.info.default_reviewer || "";
  document.getElementById("reviewer").addEventListener("change", (e) => {
    if (window.localStorage) localStorage.setItem("hsat-reviewer", e.target.value.trim());
  });
  fillTypeSelects();
  renderFacts();
  renderChips();
  if (S.info.signed && S.info.signed.length) {
    document.getElementById("sign-result").textContent = `Signed before: ${S.info.signed.join(", ")}; signing again makes a new version.`;
    document.getElementById("amend-reason").hidden = false;
  }
  document.getElementById("ack-row").hidden = S.info.adequate;
  const [strip, ev] = await Promise.all([api("strip"), api("events")]);
  S.strip = strip;
  setEvents(ev);
  renderCounts();
  await showWindow(Math.max(0, S.info.lights_off_s || 0));
  document.body.dataset.ready = "1";
}

function wire() {
  const traces = document.getElementById("traces");
  traces.addEventListener("mousedown", onMouseDown);
  traces.addEventListener("mousemove", onMouseMove);
  window.addEventListener("mouseup", (ev) => { if (S.drag) onMouseUp({ offsetX: ev.clientX - traces.getBoundingClientRect().left, offsetY: ev.clientY - traces.getBoundingClientRect().top }); });
  document.getElementById("night").addEventListener("click", onNightClick);
  document.addEventListener("keydown", onKey);
  ["mousemove", "mousedown", "wheel"].forEach((n) => document.addEventListener(n, () => { S.lastActivity = Date.now(); }, { passive: true }));
  document.getElementById("btn-back").onclick = () => showWindow(S.t0 - S.span);
  document.getElementById("btn-fwd").onclick = () => showWindow(S.t0 + S.span);
  document.getElementById("span-select").onchange = (e) => setSpan(+e.target.value);
  document.getElementById("btn-next-event").onclick = () => jump(1);
  document.getElementById("btn-prev-event").onclick = () => jump(-1);
  document.getElementById("btn-keep").onclick = () => editSelected("accept");
  document.getElementById("btn-reject").onclick = () => editSelected("reject");
  document.getElementById("btn-retype").onclick = () => editSelected("retype", { event: document.getElementById("retype-select").value });
  document.getElementById("btn-add").onclick = addMarked;
  document.getElementById("btn-span-clear").onclick = () => { S.mark = null; document.getElementById("span-card").hidden = true; drawTraces(); };
  document.getElementById("btn-rescore").onclick = rescore;
  document.getElementById("btn-sign").onclick = sign;
  document.getElementById("btn-finish").onclick = finish;
  window.addEventListener("resize", () => { if (S.info) showWindow(S.t0); });
  // Keep the server awake while someone is actually using the page.
  setInterval(() => {
    if (!S.closed && Date.now() - S.lastActivity < 70000) api("alive", {}).catch(() => {});
  }, 60000);
}

wire();
start();
