// The test grid as a plan view (x to the right, y up, metres): one circle per point,
// filled when done, yellow while partly measured, ringed red where the hammer goes next.

const NS = "http://www.w3.org/2000/svg";
const R = 17; // circle radius, user units (the view box is scaled to the SVG's width)
const CELL = 52; // least distance between neighbouring points after scaling, user units

function make(tag, attrs) {
  const el = document.createElementNS(NS, tag);
  for (const [k, v] of Object.entries(attrs)) el.setAttribute(k, String(v));
  return el;
}

/**
 * Draw `points` ([{label, x, y}]) into `svg`. status(label) -> "done" | "part" | "todo";
 * here: the current label; onPick(label) is called when a point is tapped (null: a picture).
 */
export function drawGrid(svg, points, status, here, onPick) {
  svg.replaceChildren();
  if (!points.length) return;
  points = planView(points);
  const xs = points.map((p) => p.x);
  const ys = points.map((p) => p.y);
  const x0 = Math.min(...xs);
  const y1 = Math.max(...ys);
  // Scale so that the closest two distinct coordinates sit CELL apart on either axis.
  const step = Math.min(gap(xs), gap(ys));
  const k = Number.isFinite(step) ? CELL / step : 1;
  const width = (Math.max(...xs) - x0) * k + 2 * (R + 6);
  const height = (y1 - Math.min(...ys)) * k + 2 * (R + 6);
  svg.setAttribute("viewBox", `0 0 ${width} ${height}`);
  for (const p of points) {
    const cx = (p.x - x0) * k + R + 6;
    const cy = (y1 - p.y) * k + R + 6;
    const g = make("g", { class: `pt ${status(p.label)}${p.label === here ? " here" : ""}`,
                          "data-label": p.label });
    if (onPick) { g.setAttribute("role", "button"); g.setAttribute("tabindex", "0"); }
    g.append(make("circle", { class: "hit", cx, cy, r: Math.max(R, CELL / 2) }));
    g.append(make("circle", { cx, cy, r: R }));
    const t = make("text", { x: cx, y: cy });
    t.textContent = p.label;
    g.append(t);
    const title = make("title", {});
    title.textContent = `${p.label}: ${({ done: "done", part: "partly measured", todo: "to do" })[status(p.label)]}`;
    g.append(title);
    if (onPick) g.addEventListener("click", () => onPick(p.label));
    svg.append(g);
  }
}

/**
 * The points as drawn: at their x and y, unless two of them would land on one spot (a grid
 * with no coordinates, or points one above the other in z); then in rows, in grid order.
 */
function planView(points) {
  const spots = new Set(points.map((p) => `${p.x.toPrecision(9)},${p.y.toPrecision(9)}`));
  if (spots.size === points.length) return points;
  const columns = Math.ceil(Math.sqrt(points.length));
  return points.map((p, i) => ({ label: p.label, x: i % columns, y: -Math.floor(i / columns) }));
}

/** The smallest positive difference between sorted distinct values (Infinity if none). */
function gap(values) {
  const v = [...new Set(values.map((x) => Number(x.toPrecision(9))))].sort((a, b) => a - b);
  let best = Infinity;
  for (let i = 1; i < v.length; i++) best = Math.min(best, v[i] - v[i - 1]);
  return best;
}
