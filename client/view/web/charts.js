// The FRF panels, the stabilization diagram and the auto-MAC matrix, drawn on canvases.
import { fit, level, INK, SOFT, LINE, MARK, PICK } from "./palette.js";

const PAD = { left: 52, right: 10, top: 8, bottom: 24 };
const TRACE = [INK, "#7d5a2b", "#4d6f3a", "#6b4a7a"];

// A shared frequency window [lo, hi] in Hz over lines freq; charts redraw when it moves.
export class Band {
  constructor(freq, onChange) {
    this.freq = freq; this.lo = freq[0]; this.hi = freq[freq.length - 1]; this.onChange = onChange;
  }
  reset() { this.set(this.freq[0], this.freq[this.freq.length - 1]); }
  zoom(factor, at = (this.lo + this.hi) / 2) {
    const full = this.freq[this.freq.length - 1] - this.freq[0];
    const span = Math.min(full, Math.max((this.hi - this.lo) * factor, 20 * (this.freq[1] - this.freq[0])));
    const t = (at - this.lo) / (this.hi - this.lo);
    this.set(at - t * span, at - t * span + span);
  }
  pan(share) { const d = share * (this.hi - this.lo); this.set(this.lo + d, this.hi + d); }
  set(lo, hi) {
    const f0 = this.freq[0], f1 = this.freq[this.freq.length - 1], span = hi - lo;
    if (lo < f0) { lo = f0; hi = f0 + span; }
    if (hi > f1) { hi = f1; lo = Math.max(f0, f1 - span); }
    this.lo = lo; this.hi = hi; this.onChange();
  }
  x(f, w) { return PAD.left + ((f - this.lo) / (this.hi - this.lo)) * (w - PAD.left - PAD.right); }
  f(x, w) { return this.lo + ((x - PAD.left) / (w - PAD.left - PAD.right)) * (this.hi - this.lo); }
  line(f) { // the nearest frequency line
    let best = 0;
    for (let i = 1; i < this.freq.length; i++) if (Math.abs(this.freq[i] - f) < Math.abs(this.freq[best] - f)) best = i;
    return best;
  }
}

function ticks(lo, hi, count) {
  const raw = (hi - lo) / count, mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => s >= raw);
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi; v += step) out.push(+v.toPrecision(12));
  return out;
}

// One panel: y range [y0, y1] inside box {top, height}; traces are arrays over band.freq.
function panel(ctx, band, w, box, y0, y1, traces, unit, labels = true) {
  const Y = (v) => box.top + box.height * (1 - (v - y0) / (y1 - y0));
  ctx.strokeStyle = LINE; ctx.fillStyle = SOFT; ctx.lineWidth = 1; ctx.font = "10px system-ui, sans-serif";
  ctx.beginPath();
  for (const v of labels ? ticks(y0, y1, 3) : []) { ctx.moveTo(PAD.left, Y(v)); ctx.lineTo(w - PAD.right, Y(v)); ctx.fillText(`${v}`, 4, Y(v) + 3); }
  ctx.stroke();
  if (labels) ctx.fillText(unit, 4, box.top + 9);
  const i0 = Math.max(0, band.line(band.lo) - 1), i1 = Math.min(band.freq.length - 1, band.line(band.hi) + 1);
  ctx.save(); ctx.beginPath(); ctx.rect(PAD.left, box.top, w - PAD.left - PAD.right, box.height); ctx.clip();
  traces.forEach((y, k) => {
    ctx.strokeStyle = TRACE[k % TRACE.length]; ctx.lineWidth = 1.2; ctx.beginPath();
    for (let i = i0; i <= i1; i++) {
      const X = band.x(band.freq[i], w), v = y[i] === null ? NaN : Y(y[i]);
      if (i === i0) ctx.moveTo(X, v); else ctx.lineTo(X, v);
    }
    ctx.stroke();
  });
  ctx.restore();
}

function range(traces, i0, i1, pad) {
  let lo = Infinity, hi = -Infinity;
  for (const y of traces) for (let i = i0; i <= i1; i++) if (y[i] !== null && isFinite(y[i])) { lo = Math.min(lo, y[i]); hi = Math.max(hi, y[i]); }
  if (!isFinite(lo)) return [0, 1];
  return [Math.floor(lo - pad), Math.ceil(hi + pad)];
}

function xAxis(ctx, band, w, h) {
  ctx.fillStyle = SOFT; ctx.font = "10px system-ui, sans-serif";
  for (const f of ticks(band.lo, band.hi, 6)) {
    const text = `${f}`, x = band.x(f, w) - ctx.measureText(text).width / 2;
    ctx.fillText(text, Math.min(x, w - ctx.measureText(text).width - 2), h - 8);
  }
  ctx.fillText("f / Hz", 4, h - 8);
}

function markers(ctx, band, w, top, bottom, freqs, selected, ods) {
  freqs.forEach((f, m) => {
    ctx.strokeStyle = m === selected ? MARK : "rgba(180,70,42,0.35)"; ctx.lineWidth = m === selected ? 2 : 1;
    ctx.beginPath(); ctx.moveTo(band.x(f, w), top); ctx.lineTo(band.x(f, w), bottom); ctx.stroke();
  });
  if (ods !== null) {
    ctx.strokeStyle = PICK; ctx.lineWidth = 2; ctx.setLineDash([4, 3]);
    ctx.beginPath(); ctx.moveTo(band.x(ods, w), top); ctx.lineTo(band.x(ods, w), bottom); ctx.stroke();
    ctx.setLineDash([]);
  }
}

// FRF panels: magnitude (dB), phase (° when given) and coherence of the chosen traces.
export function drawFrf(canvas, band, frf, freqs, selected, ods) {
  const { ctx, w, h } = fit(canvas);
  ctx.clearRect(0, 0, w, h);
  const i0 = band.line(band.lo), i1 = band.line(band.hi);
  const boxes = frf.phase ? [0.5, 0.25, 0.25] : [0.7, 0, 0.3];
  const inner = h - PAD.top - PAD.bottom;
  let top = PAD.top;
  const mag = { top, height: boxes[0] * inner - 6 };
  panel(ctx, band, w, mag, ...range(frf.mag, i0, i1, 3), frf.mag, "dB");
  top += boxes[0] * inner;
  if (frf.phase) {
    panel(ctx, band, w, { top, height: boxes[1] * inner - 6 }, -180, 180, frf.phase, "°");
    top += boxes[1] * inner;
  }
  panel(ctx, band, w, { top, height: boxes[2] * inner - 6 }, 0, 1, frf.coherence, "γ²");
  markers(ctx, band, w, PAD.top, h - PAD.bottom, freqs, selected, ods);
  xAxis(ctx, band, w, h);
}

// Stabilization diagram: poles per model order over the summed FRF; the modes as columns.
export function drawStab(canvas, band, summed, poles, freqs, selected) {
  const { ctx, w, h } = fit(canvas);
  ctx.clearRect(0, 0, w, h);
  const box = { top: PAD.top, height: h - PAD.top - PAD.bottom };
  const i0 = band.line(band.lo), i1 = band.line(band.hi);
  ctx.globalAlpha = 0.35;
  panel(ctx, band, w, box, ...range([summed], i0, i1, 3), [summed], "", false);
  ctx.globalAlpha = 1;
  const orders = poles.map((p) => p.order), top = Math.max(1, ...orders);
  const Y = (o) => box.top + box.height * (1 - o / (top + 1));
  for (const row of poles) {
    row.freq_hz.forEach((f, k) => {
      if (f < band.lo || f > band.hi) return;
      ctx.beginPath(); ctx.arc(band.x(f, w), Y(row.order), row.stable[k] ? 3 : 2, 0, 2 * Math.PI);
      if (row.stable[k]) { ctx.fillStyle = PICK; ctx.fill(); } else { ctx.strokeStyle = SOFT; ctx.stroke(); }
    });
  }
  if (poles.length) {
    ctx.fillStyle = SOFT; ctx.fillText("order", 4, box.top + 9);
    for (const o of ticks(0, top, 4)) if (o > 0) ctx.fillText(`${o}`, 4, Y(o) + 3);
  }
  markers(ctx, band, w, box.top, box.top + box.height, freqs, selected, null);
  xAxis(ctx, band, w, h);
}

// The mode whose column is nearest to x (CSS px) on a chart of width w; -1 when none.
export function nearestMode(band, freqs, x, w) {
  let best = -1, gap = Infinity;
  freqs.forEach((f, m) => { const d = Math.abs(band.x(f, w) - x); if (d < gap) { gap = d; best = m; } });
  return best;
}

// Auto-MAC: one cell per mode pair, shaded 0 (paper) to 1 (ink); the selected mode framed.
export function drawMac(canvas, mac, selected) {
  const { ctx, w, h } = fit(canvas);
  ctx.clearRect(0, 0, w, h);
  const m = mac.length;
  if (!m) return;
  const c = Math.min(w, h) / m;
  mac.forEach((row, i) => row.forEach((v, j) => { ctx.fillStyle = level(v); ctx.fillRect(j * c, i * c, c, c); }));
  if (selected >= 0) {
    ctx.strokeStyle = MARK; ctx.lineWidth = 2;
    ctx.strokeRect(1, selected * c + 1, m * c - 2, c - 2);
    ctx.strokeRect(selected * c + 1, 1, c - 2, m * c - 2);
  }
}
