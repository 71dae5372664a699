// Line plots drawn by the page on a canvas: time traces as min/max bands (the rig sends
// envelopes, so every peak survives), spectra as lines, on linear or log axes.

const INK = "#14181d";
const RULE = "#dcd6c9";
export const COLOURS = ["#1f5fa8", "#c2410c", "#6b21a8", "#0f766e"];
const LEFT = 46; // px for the y tick labels
const BOTTOM = 18; // px for the x tick labels
const TOP = 6;
const RIGHT = 8;

function setup(canvas) {
  const ratio = window.devicePixelRatio || 1;
  const w = canvas.clientWidth || 300;
  const h = canvas.clientHeight || 100;
  canvas.width = Math.round(w * ratio);
  canvas.height = Math.round(h * ratio);
  const g = canvas.getContext("2d");
  g.setTransform(ratio, 0, 0, ratio, 0, 0);
  g.clearRect(0, 0, w, h);
  g.font = "600 12px system-ui, sans-serif";
  return { g, w, h };
}

/** About `n` round numbers spanning lo..hi (steps of 1, 2 or 5 times a power of ten). */
export function ticks(lo, hi, n = 4) {
  const span = hi - lo;
  if (!(span > 0)) return [lo];
  const raw = span / n;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const f = raw / mag;
  const step = (f < 1.5 ? 1 : f < 3 ? 2 : f < 7 ? 5 : 10) * mag;
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) {
    out.push(Number(v.toPrecision(12)));
  }
  return out;
}

export function label(v) {
  const a = Math.abs(v);
  if (a === 0) return "0";
  if (a >= 1e6 || a < 1e-2) return v.toExponential(0).replace("e+", "e");
  if (a >= 1000) return `${Number((v / 1000).toPrecision(3))}k`;
  return String(Number(v.toPrecision(3)));
}

/**
 * Draw `series` on `canvas`. spec: {x0, x1, y0, y1, log (y axis), xunit, series: [
 * {x: [], lo: [], hi: []} (a band) or {x: [], y: []} (a line), each with a colour]}.
 * Returns the number of data points drawn (kept in canvas.dataset.points).
 */
export function plot(canvas, spec) {
  const { g, w, h } = setup(canvas);
  const pw = w - LEFT - RIGHT;
  const ph = h - TOP - BOTTOM;
  const tr = spec.log ? (v) => Math.log10(v) : (v) => v;
  const ya = tr(spec.y0);
  const yb = tr(spec.y1);
  const X = (v) => LEFT + ((v - spec.x0) / (spec.x1 - spec.x0)) * pw;
  const Y = (v) => TOP + ph - ((tr(v) - ya) / (yb - ya)) * ph;
  // grid and tick labels
  g.strokeStyle = RULE;
  g.lineWidth = 1;
  g.fillStyle = INK;
  g.textAlign = "right";
  g.textBaseline = "middle";
  const yt = spec.log ? decades(spec.y0, spec.y1) : ticks(spec.y0, spec.y1, 3);
  for (const v of yt) {
    const y = Math.round(Y(v)) + 0.5;
    g.beginPath(); g.moveTo(LEFT, y); g.lineTo(w - RIGHT, y); g.stroke();
    g.fillText(label(v), LEFT - 4, y);
  }
  g.textAlign = "center";
  g.textBaseline = "top";
  for (const v of ticks(spec.x0, spec.x1, 4)) {
    const x = Math.round(X(v)) + 0.5;
    g.beginPath(); g.moveTo(x, TOP); g.lineTo(x, TOP + ph); g.stroke();
    // the unit takes the right-hand corner: a tick label there would overprint it
    if (x < w - RIGHT - 36) g.fillText(label(v), x, TOP + ph + 3);
  }
  g.textAlign = "right";
  g.fillText(spec.xunit, w - RIGHT, TOP + ph + 3);
  // data, clipped to the plot area
  g.save();
  g.beginPath(); g.rect(LEFT, TOP, pw, ph); g.clip();
  let points = 0;
  for (const s of spec.series) {
    g.strokeStyle = s.colour;
    g.fillStyle = s.colour;
    g.lineWidth = 2;
    g.lineJoin = "round";
    if (s.lo) {
      points += band(g, s, X, Y);
    } else {
      points += line(g, s, X, Y, spec.log);
    }
  }
  g.restore();
  canvas.dataset.points = String(points);
  return points;
}

function band(g, s, X, Y) {
  // Each bucket a vertical stroke from its minimum to its maximum, joined by its midline.
  g.beginPath();
  for (let i = 0; i < s.x.length; i++) {
    const x = X(s.x[i]);
    g.moveTo(x, Y(s.lo[i]));
    g.lineTo(x, Y(s.hi[i]) - 0.5);
  }
  g.stroke();
  return s.x.length;
}

function line(g, s, X, Y, log) {
  g.beginPath();
  let pen = false;
  let n = 0;
  for (let i = 0; i < s.x.length; i++) {
    const v = s.y[i];
    if (!(Number.isFinite(v)) || (log && v <= 0)) { pen = false; continue; }
    if (pen) g.lineTo(X(s.x[i]), Y(v)); else g.moveTo(X(s.x[i]), Y(v));
    pen = true;
    n += 1;
  }
  g.stroke();
  return n;
}

function decades(lo, hi) {
  const out = [];
  for (let e = Math.ceil(Math.log10(lo)); e <= Math.floor(Math.log10(hi)); e++) out.push(10 ** e);
  return out;
}

/** An empty plot with a word in the middle. */
export function blank(canvas, words) {
  const { g, w, h } = setup(canvas);
  g.fillStyle = "#6b7280";
  g.textAlign = "center";
  g.textBaseline = "middle";
  g.fillText(words, w / 2, h / 2);
  canvas.dataset.points = "0";
}

/** lo..hi of finite values in arrays (optionally only positive ones), with a margin. */
export function extent(arrays, { positive = false, pad = 0.06 } = {}) {
  let lo = Infinity;
  let hi = -Infinity;
  for (const a of arrays) {
    for (const v of a) {
      if (!Number.isFinite(v) || (positive && v <= 0)) continue;
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
  }
  if (lo > hi) return positive ? [1e-3, 1] : [-1, 1];
  if (positive) {
    // at most six decades below the peak: the floor of an FRF is noise, not information
    lo = Math.max(lo, hi * 1e-6);
    return [10 ** Math.floor(Math.log10(lo)), 10 ** Math.ceil(Math.log10(hi) + 1e-9)];
  }
  const m = (hi - lo) * pad || Math.abs(hi) * pad || 1;
  return [lo - m, hi + m];
}
