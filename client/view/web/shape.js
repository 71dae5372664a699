// The animated shape on the structure: a turnable 3-D view of the deformed surface, or the
// faces laid flat side by side, coloured by displacement, with the nodal lines drawn.
import { fit, signed, INK, SOFT, LINE } from "./palette.js";

const LABELS_UP_TO = 60; // point labels are drawn when there are at most this many points

export class ShapeView {
  constructor(canvas, data) {
    this.canvas = canvas;
    const pts = data.geometry.points;
    this.n = pts.length;
    this.labels = pts.map((p) => p.label);
    this.xyz = Float64Array.from(pts.flatMap((p) => p.xyz));
    this.dir = Float64Array.from(pts.flatMap((p) => p.direction));
    this.tri = Int32Array.from(data.geometry.faces.flatMap((f) => f.triangles.flat()));
    this.lines = Int32Array.from(data.geometry.lines.flat());
    this.flat = {
      xy: Float64Array.from(data.flat.vertices), point: Int32Array.from(data.flat.point),
      tri: Int32Array.from(data.flat.triangles), normal: Float64Array.from(data.flat.normal),
    };
    this.unmeasured = new Set(data.unmeasured);
    this.scale = data.scale_m;
    this.layout = "solid";
    this.yaw = -0.6; this.pitch = 0.75;
    this.pos = new Float64Array(3 * this.n);
    this.value = new Float64Array(this.n);
    this.order = new Uint32Array(Math.max(this.tri.length, this.flat.tri.length) / 3);
    this.depth = new Float64Array(this.order.length);
    this.setShape(new Float64Array(this.n), new Float64Array(this.n));
    this.bounds();
  }

  // The centre and radius of the undeformed structure, so the view does not jump.
  bounds() {
    const lo = [Infinity, Infinity, Infinity], hi = [-Infinity, -Infinity, -Infinity];
    for (let i = 0; i < this.n; i++) for (let k = 0; k < 3; k++) {
      lo[k] = Math.min(lo[k], this.xyz[3 * i + k]); hi[k] = Math.max(hi[k], this.xyz[3 * i + k]);
    }
    this.centre = lo.map((v, k) => (v + hi[k]) / 2);
    this.radius = Math.max(1e-9, Math.hypot(hi[0] - lo[0], hi[1] - lo[1], hi[2] - lo[2]) / 2);
  }

  // re, im: the shape over the geometry's points (largest component 1, real).
  setShape(re, im) {
    this.re = Float64Array.from(re); this.im = Float64Array.from(im);
    this.nodal = nodalSegments(this.tri, (i) => this.re[i]);
    const fp = this.flat.point, fn = this.flat.normal;
    this.flatNodal = nodalSegments(this.flat.tri, (v) => this.re[fp[v]] * this.along(fp[v], fn, v));
  }

  along(p, normal, v) {
    const d = this.dir;
    return d[3 * p] * normal[3 * v] + d[3 * p + 1] * normal[3 * v + 1] + d[3 * p + 2] * normal[3 * v + 2];
  }

  // Deformed positions at phase (rad) with amplitude factor amp:
  // x + amp·scale·(re cos φ − im sin φ)·direction.
  deform(phase, amp) {
    const c = Math.cos(phase), s = Math.sin(phase), k = amp * this.scale;
    for (let i = 0; i < this.n; i++) {
      const v = this.re[i] * c - this.im[i] * s;
      this.value[i] = v;
      for (let j = 0; j < 3; j++) this.pos[3 * i + j] = this.xyz[3 * i + j] + k * v * this.dir[3 * i + j];
    }
  }

  draw(phase, amp) {
    this.deform(phase, amp);
    const { ctx, w, h } = fit(this.canvas);
    ctx.clearRect(0, 0, w, h);
    if (this.layout === "flat" && this.flat.tri.length) this.drawFlat(ctx, w, h);
    else this.drawSolid(ctx, w, h);
  }

  // Orthographic view: turn by yaw about z, then tilt by pitch; z of the result is depth.
  projector(w, h) {
    const cy = Math.cos(this.yaw), sy = Math.sin(this.yaw), cp = Math.cos(this.pitch), sp = Math.sin(this.pitch);
    const k = (0.42 * Math.min(w, h)) / this.radius, [cx0, cy0, cz0] = this.centre;
    return (x, y, z) => {
      x -= cx0; y -= cy0; z -= cz0;
      const a = cy * x - sy * y, b = sy * x + cy * y;
      return [w / 2 + k * a, h / 2 - k * (cp * z + sp * b), sp * z - cp * b];
    };
  }

  drawSolid(ctx, w, h) {
    const project = this.projector(w, h), n = this.n, p = this.pos;
    const screen = new Float64Array(3 * n);
    for (let i = 0; i < n; i++) screen.set(project(p[3 * i], p[3 * i + 1], p[3 * i + 2]), 3 * i);
    const rest = new Float64Array(3 * n);
    for (let i = 0; i < n; i++) rest.set(project(this.xyz[3 * i], this.xyz[3 * i + 1], this.xyz[3 * i + 2]), 3 * i);
    this.screen = screen;
    this.fillTriangles(ctx, screen, this.tri, (i) => this.value[i], (i) => i);
    ctx.strokeStyle = LINE; ctx.lineWidth = 1; ctx.setLineDash([3, 3]);
    strokeEdges(ctx, rest, this.tri, this.lines); // the structure at rest, faintly
    ctx.setLineDash([]);
    ctx.strokeStyle = INK; ctx.lineWidth = 1.4;
    strokeEdges(ctx, screen, new Int32Array(0), this.lines);
    drawNodal(ctx, this.nodal, screen);
    this.drawPoints(ctx, screen, n, (i) => i);
  }

  drawFlat(ctx, w, h) {
    const f = this.flat, nv = f.point.length;
    let x0 = Infinity, x1 = -Infinity, y0 = Infinity, y1 = -Infinity;
    for (let v = 0; v < nv; v++) {
      x0 = Math.min(x0, f.xy[2 * v]); x1 = Math.max(x1, f.xy[2 * v]);
      y0 = Math.min(y0, f.xy[2 * v + 1]); y1 = Math.max(y1, f.xy[2 * v + 1]);
    }
    const k = 0.9 * Math.min(w / Math.max(x1 - x0, 1e-9), h / Math.max(y1 - y0, 1e-9));
    const screen = new Float64Array(3 * nv), value = new Float64Array(nv);
    for (let v = 0; v < nv; v++) {
      screen[3 * v] = w / 2 + k * (f.xy[2 * v] - (x0 + x1) / 2);
      screen[3 * v + 1] = h / 2 - k * (f.xy[2 * v + 1] - (y0 + y1) / 2);
      value[v] = this.value[f.point[v]] * this.along(f.point[v], f.normal, v);
    }
    this.screen = screen;
    this.fillTriangles(ctx, screen, f.tri, (v) => value[v], null);
    ctx.strokeStyle = LINE; ctx.lineWidth = 1;
    strokeEdges(ctx, screen, f.tri, new Int32Array(0));
    drawNodal(ctx, this.flatNodal, screen);
    this.drawPoints(ctx, screen, nv, (v) => f.point[v]);
  }

  // Triangles far to near (painter's order when depth is given), each in its mean value's colour.
  fillTriangles(ctx, screen, tri, value, depthOf) {
    ctx.lineWidth = 1;
    const t = tri.length / 3, order = this.order.subarray(0, t), depth = this.depth;
    for (let i = 0; i < t; i++) {
      order[i] = i;
      depth[i] = depthOf ? screen[3 * tri[3 * i] + 2] + screen[3 * tri[3 * i + 1] + 2] + screen[3 * tri[3 * i + 2] + 2] : 0;
    }
    if (depthOf) order.sort((a, b) => depth[b] - depth[a]);
    for (const i of order) {
      const a = tri[3 * i], b = tri[3 * i + 1], c = tri[3 * i + 2];
      ctx.fillStyle = ctx.strokeStyle = signed((value(a) + value(b) + value(c)) / 3);
      ctx.beginPath();
      ctx.moveTo(screen[3 * a], screen[3 * a + 1]);
      ctx.lineTo(screen[3 * b], screen[3 * b + 1]);
      ctx.lineTo(screen[3 * c], screen[3 * c + 1]);
      ctx.closePath(); ctx.fill(); ctx.stroke(); // stroked too: no seams between triangles
    }
  }

  drawPoints(ctx, screen, count, pointOf) {
    const labels = this.n <= LABELS_UP_TO;
    ctx.font = "10px system-ui, sans-serif";
    for (let v = 0; v < count; v++) {
      const p = pointOf(v), x = screen[3 * v], y = screen[3 * v + 1];
      ctx.beginPath(); ctx.arc(x, y, 2.2, 0, 2 * Math.PI);
      if (this.unmeasured.has(p)) { ctx.strokeStyle = SOFT; ctx.stroke(); }
      else { ctx.fillStyle = INK; ctx.fill(); }
      if (labels) { ctx.fillStyle = INK; ctx.fillText(this.labels[p], x + 3, y - 3); }
    }
  }
}

function strokeEdges(ctx, screen, tri, lines) {
  ctx.beginPath();
  for (let i = 0; i < tri.length; i += 3) {
    const a = tri[i], b = tri[i + 1], c = tri[i + 2];
    ctx.moveTo(screen[3 * a], screen[3 * a + 1]);
    ctx.lineTo(screen[3 * b], screen[3 * b + 1]);
    ctx.lineTo(screen[3 * c], screen[3 * c + 1]);
    ctx.closePath();
  }
  for (let i = 0; i < lines.length; i += 2) {
    ctx.moveTo(screen[3 * lines[i]], screen[3 * lines[i] + 1]);
    ctx.lineTo(screen[3 * lines[i + 1]], screen[3 * lines[i + 1] + 1]);
  }
  ctx.stroke();
}

// Where the shape's real part crosses zero inside each triangle: segments between two edge
// points, each an edge (i, j) and the fraction t along it, linear interpolation.
export function nodalSegments(tri, value) {
  const out = [];
  for (let k = 0; k < tri.length; k += 3) {
    const ends = [];
    for (const [i, j] of [[tri[k], tri[k + 1]], [tri[k + 1], tri[k + 2]], [tri[k + 2], tri[k]]]) {
      const a = value(i), b = value(j);
      if ((a < 0 && b >= 0) || (a >= 0 && b < 0)) ends.push([i, j, a / (a - b)]);
    }
    if (ends.length === 2) out.push(ends);
  }
  return out;
}

function drawNodal(ctx, segments, screen) {
  ctx.strokeStyle = INK; ctx.lineWidth = 2; ctx.setLineDash([]);
  ctx.beginPath();
  for (const ends of segments) {
    ends.forEach(([i, j, t], e) => {
      const x = screen[3 * i] + t * (screen[3 * j] - screen[3 * i]);
      const y = screen[3 * i + 1] + t * (screen[3 * j + 1] - screen[3 * i + 1]);
      if (e === 0) ctx.moveTo(x, y); else ctx.lineTo(x, y);
    });
  }
  ctx.stroke();
}
