// Colours and canvas set-up shared by the page's drawings.

// Diverging scale for signed displacement: deep teal (−1) through pale sand (0) to rust (+1).
const LOW = [22, 92, 107], MID = [238, 229, 205], HIGH = [176, 64, 38];
const STEPS = 65;

function mix(a, b, t) {
  return `rgb(${Math.round(a[0] + (b[0] - a[0]) * t)},${Math.round(a[1] + (b[1] - a[1]) * t)},${Math.round(a[2] + (b[2] - a[2]) * t)})`;
}

export const DIVERGING = Array.from({ length: STEPS }, (_, i) => {
  const t = (2 * i) / (STEPS - 1) - 1;
  return t < 0 ? mix(MID, LOW, -t) : mix(MID, HIGH, t);
});

// The colour of value v in [-1, 1] (clamped).
export function signed(v) {
  const i = Math.round(((Math.max(-1, Math.min(1, v)) + 1) / 2) * (STEPS - 1));
  return DIVERGING[i];
}

// Sequential scale for 0..1 (MAC): paper to ink.
export function level(v) {
  return mix([250, 247, 240], [31, 43, 48], Math.max(0, Math.min(1, v)));
}

export const INK = "#1f2b30", SOFT = "#8a958f", LINE = "#d9d2c2", MARK = "#b4462a", PICK = "#2d6f7e";

// Size the canvas's backing store to its CSS box and the device's pixel ratio; returns
// a 2-D context scaled so that drawing is in CSS pixels, with the box's width and height.
export function fit(canvas) {
  const ratio = window.devicePixelRatio || 1;
  const w = canvas.clientWidth, h = canvas.clientHeight;
  if (canvas.width !== Math.round(w * ratio) || canvas.height !== Math.round(h * ratio)) {
    canvas.width = Math.round(w * ratio);
    canvas.height = Math.round(h * ratio);
  }
  const ctx = canvas.getContext("2d");
  ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
  return { ctx, w, h };
}
