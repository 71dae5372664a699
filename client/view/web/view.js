// taprig view: loads the test's data from this server and wires the panels together.
import { Band, drawFrf, drawStab, drawMac, nearestMode } from "./charts.js";
import { ShapeView } from "./shape.js";

const $ = (id) => document.getElementById(id);
const state = {
  data: null, band: null, shapes: null, frf: null, selected: -1, ods: null,
  playing: true, phase: 0, last: null, frames: 0, firstFrameAt: null, drawMs: 0, frame: null,
};

// What a test or benchmark reads: the frame last drawn, with everything that made it.
window.taprigView = {
  get ready() { return state.data !== null; },
  get frames() { return state.frames; },
  get firstFrameAt() { return state.firstFrameAt; },
  get drawMs() { return state.drawMs; },
  get selected() { return state.selected; },
  lastFrame: () => state.frame,
  select: (m) => selectMode(m),
};

async function getJson(path) {
  const answer = await fetch(path);
  if (!answer.ok) throw new Error(`${path}: ${answer.status} ${await answer.text()}`);
  return answer.json();
}

function fmt(v, digits) { return v === null || !isFinite(v) ? "–" : v.toFixed(digits); }

function modeFreqs() { return state.data.modes.list.map((m) => m.freq_hz); }

function redrawCharts() {
  const d = state.data, freqs = modeFreqs();
  drawFrf($("frf"), state.band, state.frf, freqs, state.selected, state.ods ? state.ods.freq_hz : null);
  drawStab($("stab"), state.band, d.summed_db, d.modes.poles, freqs, state.selected);
  drawMac($("mac"), d.modes.mac, state.selected);
}

function selectMode(m) {
  const list = state.data.modes.list;
  if (m < 0 || m >= list.length) return;
  state.selected = m; state.ods = null;
  const mode = list[m];
  state.shapes.setShape(mode.shape.re, mode.shape.im);
  $("shape-note").textContent = `mode ${m + 1}: ${fmt(mode.freq_hz, 2)} Hz, ζ ${fmt(100 * mode.damping_ratio, 2)} %` +
    ` — colour: displacement along each point's direction; black lines: nodal lines`;
  for (const row of $("modes").tBodies[0].rows) row.setAttribute("aria-selected", String(+row.dataset.mode === m));
  redrawCharts();
}

async function showDeflection(line) {
  const ods = await getJson(`/data/ods/${line}`);
  state.ods = ods; state.selected = -1;
  state.shapes.setShape(ods.shape.re, ods.shape.im);
  $("shape-note").textContent = `operating deflection shape at ${fmt(ods.freq_hz, 2)} Hz (H1 to ${ods.response})`;
  for (const row of $("modes").tBodies[0].rows) row.setAttribute("aria-selected", "false");
  redrawCharts();
}

async function chooseTrace(row) {
  const d = state.data;
  if (row < 0) {
    state.frf = { mag: [d.summed_db], phase: null, coherence: [d.coherence] };
  } else {
    const p = await getJson(`/data/point/${row}`);
    state.frf = { mag: p.responses.map((r) => r.mag_db), phase: p.responses.map((r) => r.phase_deg),
                  coherence: p.responses.map((r) => r.coherence) };
  }
  redrawCharts();
}

function fillTable(d) {
  const body = $("modes").tBodies[0];
  d.modes.list.forEach((m, i) => {
    const tr = body.insertRow();
    tr.dataset.mode = i; tr.tabIndex = 0; tr.setAttribute("aria-selected", "false");
    for (const text of [i + 1, fmt(m.freq_hz, 2), fmt(100 * m.damping_ratio, 2), fmt(m.mpc, 3), m.flags.join(" ")]) {
      tr.insertCell().textContent = text;
    }
    tr.addEventListener("click", () => selectMode(i));
    tr.addEventListener("keydown", (e) => {
      if (e.key === "Enter" || e.key === " ") { selectMode(i); e.preventDefault(); }
      if (e.key === "ArrowDown" && tr.nextElementSibling) { tr.nextElementSibling.focus(); selectMode(i + 1); e.preventDefault(); }
      if (e.key === "ArrowUp" && tr.previousElementSibling) { tr.previousElementSibling.focus(); selectMode(i - 1); e.preventDefault(); }
    });
  });
  $("modes-caption").textContent = `modes: ${d.modes.label}`;
}

function wireFrf() {
  const canvas = $("frf"), band = state.band;
  let drag = null;
  canvas.addEventListener("wheel", (e) => {
    e.preventDefault();
    band.zoom(e.deltaY > 0 ? 1.25 : 0.8, band.f(e.offsetX, canvas.clientWidth));
  }, { passive: false });
  canvas.addEventListener("pointerdown", (e) => { drag = { x: e.offsetX, moved: false }; });
  canvas.addEventListener("pointermove", (e) => {
    if (!drag || Math.abs(e.offsetX - drag.x) < 3) return;
    band.pan(-(e.offsetX - drag.x) / canvas.clientWidth); drag = { x: e.offsetX, moved: true };
  });
  canvas.addEventListener("pointerup", (e) => {
    if (drag && !drag.moved) showDeflection(band.line(band.f(e.offsetX, canvas.clientWidth)));
    drag = null;
  });
  canvas.addEventListener("keydown", (e) => {
    const act = { "+": () => band.zoom(0.8), "=": () => band.zoom(0.8), "-": () => band.zoom(1.25),
                  "0": () => band.reset(), ArrowLeft: () => band.pan(-0.1), ArrowRight: () => band.pan(0.1),
                  Enter: () => showDeflection(band.line((band.lo + band.hi) / 2)) }[e.key];
    if (act) { act(); e.preventDefault(); }
  });
  $("zoom-in").addEventListener("click", () => band.zoom(0.8));
  $("zoom-out").addEventListener("click", () => band.zoom(1.25));
  $("zoom-reset").addEventListener("click", () => band.reset());
  $("which").addEventListener("change", (e) => chooseTrace(+e.target.value));
}

function wireStab() {
  const canvas = $("stab");
  canvas.addEventListener("click", (e) => selectMode(nearestMode(state.band, modeFreqs(), e.offsetX, canvas.clientWidth)));
  canvas.addEventListener("keydown", (e) => {
    const step = { ArrowLeft: -1, ArrowRight: 1 }[e.key];
    if (step) { selectMode(Math.max(0, state.selected + step)); e.preventDefault(); }
  });
  $("mac").addEventListener("click", (e) => {
    const m = state.data.modes.list.length, c = Math.min($("mac").clientWidth, $("mac").clientHeight) / m;
    selectMode(Math.floor(e.offsetY / c));
  });
}

function wireShape() {
  const canvas = $("shape"), view = state.shapes;
  let drag = null;
  canvas.addEventListener("pointerdown", (e) => { drag = [e.offsetX, e.offsetY]; canvas.setPointerCapture(e.pointerId); });
  canvas.addEventListener("pointermove", (e) => {
    if (!drag) return;
    view.yaw += (e.offsetX - drag[0]) * 0.01;
    view.pitch = Math.max(-1.5, Math.min(1.5, view.pitch + (e.offsetY - drag[1]) * 0.01));
    drag = [e.offsetX, e.offsetY];
  });
  canvas.addEventListener("pointerup", () => { drag = null; });
  canvas.addEventListener("keydown", (e) => {
    const turn = { ArrowLeft: [-0.1, 0], ArrowRight: [0.1, 0], ArrowUp: [0, -0.1], ArrowDown: [0, 0.1] }[e.key];
    if (turn) { view.yaw += turn[0]; view.pitch = Math.max(-1.5, Math.min(1.5, view.pitch + turn[1])); e.preventDefault(); }
  });
  $("layout").addEventListener("change", (e) => { view.layout = e.target.value; });
  const play = $("play");
  const toggle = () => {
    state.playing = !state.playing;
    play.textContent = state.playing ? "pause" : "play"; play.setAttribute("aria-pressed", String(state.playing));
  };
  play.addEventListener("click", toggle);
  document.addEventListener("keydown", (e) => {
    if (e.key === " " && !["BUTTON", "SELECT", "INPUT", "TR"].includes(document.activeElement.tagName)) { toggle(); e.preventDefault(); }
  });
}

function animate(now) {
  if (state.last !== null && state.playing) state.phase = (state.phase + 2 * Math.PI * +$("speed").value * (now - state.last) / 1000) % (2 * Math.PI);
  state.last = now;
  const amp = +$("amp").value, t0 = performance.now();
  state.shapes.draw(state.phase, amp);
  state.drawMs = 0.9 * state.drawMs + 0.1 * (performance.now() - t0);
  state.frames += 1;
  if (state.firstFrameAt === null && state.frames >= 2) state.firstFrameAt = performance.now();
  state.frame = { phase: state.phase, amp, scale_m: state.shapes.scale, layout: state.shapes.layout,
                  mode: state.selected, positions: Array.from(state.shapes.pos), frame: state.frames };
  requestAnimationFrame(animate);
}

async function main() {
  const d = await getJson("/data");
  state.data = d;
  const t = d.test;
  document.title = `${t.name} — taprig view`;
  $("title").textContent = `${t.name}`;
  $("subtitle").textContent = `rig ${t.rig || "–"} · ${t.date || "date unknown"} · ${t.points.length} points · ` +
    `${t.roving_mode} roving · responses ${t.responses.join(", ")} · H1 in ${t.unit}`;
  t.points.forEach((p, i) => $("which").add(new Option(p, i)));
  $("stab-note").textContent = d.modes.poles.length ? "filled: stable poles; rings: others; red columns: the modes"
    : `no poles to show: the modes are ${d.modes.label}; red columns mark them`;
  state.band = new Band(d.freq_hz, redrawCharts);
  state.shapes = new ShapeView($("shape"), d);
  fillTable(d);
  wireFrf(); wireStab(); wireShape();
  await chooseTrace(-1);
  if (d.modes.list.length) selectMode(0);
  window.addEventListener("resize", redrawCharts);
  requestAnimationFrame(animate);
}

main().catch((err) => { $("subtitle").textContent = `could not load the test: ${err.message}`; console.error(err); });
