// taprig rove: the operator's page. It shows where to tap next and what the last tap gave,
// and drives the session with a thumb. State comes from /v1/state and /v1/hits/last; the
// event stream says when to look again.

import { EventStream, Rig, forgetToken, saveToken, takeTokenFromAddress, tokenFrom } from "./link.js";
import { COLOURS, blank, extent, plot } from "./plot.js";
import { drawGrid } from "./grid.js";

const $ = (id) => document.getElementById(id);
const CONFIRM_MS = 3000; // a second tap within this confirms an action that drops averages
const FORCE_COLOUR = "#243447";

// What each rejection code is called in the headline; the sentence after it comes from the rig.
const REASON = {
  double_hit: "Double hit",
  overload: "Overload",
  gap: "Samples lost",
  too_soft: "Too soft",
  operator: "Rejected by you",
  point_done: "Already measured",
};

const model = {
  session: null, // the rig's session snapshot
  state: null, // the rest of /v1/state
  test: null, // name of the test whose grid is loaded
  grid: [], // [{label, x, y}]
  last: null, // /v1/hits/last
  verdict: { kind: "idle", title: "No tap yet", detail: "Arm the rig, then tap the point shown above." },
  link: "connecting",
  linkDetail: "",
  device: null, // last device event
  notice: "",
};
let rig = null;
let stream = null;
let lastHitAsked = 0;
let pending = null; // {key, until}: an action waiting for its confirming second tap
let noticeTimer = 0;

// ---------------------------------------------------------------- pairing

function start() {
  wireControls();
  const token = takeTokenFromAddress();
  if (token) paired(token);
  else unpaired("");
}

function paired(token) {
  rig = new Rig(token, () => {
    forgetToken();
    unpaired("The rig refused this phone's token (it may have been renewed with "
             + "taprigd pair --rotate): pair again with taprigd pair on the rig.");
  });
  $("unpaired").hidden = true;
  $("app").hidden = false;
  $("dock").hidden = false;
  fetch("/v1/info", { cache: "no-store" }).then((r) => r.json())
    .then((info) => { $("rig-name").textContent = info.rig; document.title = `${info.rig} · rove`; })
    .catch(() => {});
  stream = new EventStream(rig, { onEvent, onOpen: catchUp, onStatus: linkStatus });
  stream.start();
  render();
}

function unpaired(message) {
  stream?.stop();
  stream = null;
  rig = null;
  $("app").hidden = true;
  $("dock").hidden = true;
  $("unpaired").hidden = false;
  $("pair-error").textContent = message;
  linkStatus("unpaired", "");
}

// ---------------------------------------------------------------- from the rig

function linkStatus(state, detail) {
  model.link = state;
  model.linkDetail = detail;
  const chip = $("link-chip");
  chip.dataset.state = state;
  chip.textContent = { live: "live", connecting: "connecting…", down: "no link", unpaired: "not paired" }[state];
  // "connecting" right after "down" is still no link: the strip stays until the stream is live.
  if (state === "live" || state === "unpaired") $("offline").hidden = true;
  else if (state === "down") $("offline").hidden = false;
  renderHealth();
}

async function catchUp() {
  // After every (re)connection: whatever happened while the stream was down.
  await Promise.allSettled([refreshState(), refreshLastHit()]);
  const s = model.session;
  const last = model.last;
  // A tap still waiting for a decision (the page was reloaded, or the phone was away):
  // show its verdict and the choice again.
  if (s && s.waiting && last && last.waiting && last.point === s.point) {
    model.verdict = { ...verdictOf(asEvent(last)), point: last.point };
  } else if (s && s.complete && !s.again && s.tally) {
    model.verdict = finishedVerdict(s.tally, s.point);
  }
  render();
}

/** The last-hit view's findings ({code, message}) as a hit event's ([code, message]). */
function asEvent(view) {
  const pairs = (fs) => (fs || []).map((f) => [f.code, f.message]);
  return { ...view, rejections: pairs(view.rejections), warnings: pairs(view.warnings) };
}

/** The test's end: the finished panel stands in for the verdict until the operator moves
 * the cursor from `point`, where the test ended. */
function finishedVerdict(t, point) {
  return { kind: "finished", title: "Test done", point: point || null,
           detail: `${t.points} of ${t.grid_points} points measured.` };
}

/** The test's tally in words: points, averages, rejected taps, time. */
function tallyText(t) {
  const plural = (n, one, many) => `${n} ${n === 1 ? one : many}`;
  const parts = [`${t.points} of ${t.grid_points} points`, plural(t.averages, "average", "averages"),
                 plural(t.rejected, "rejected tap", "rejected taps")];
  if (Number.isFinite(t.duration_s)) parts.push(`${duration(t.duration_s)}`);
  return parts.join(" · ");
}

function duration(s) {
  const m = Math.floor(s / 60);
  const h = Math.floor(m / 60);
  if (h) return `${h} h ${m % 60} min`;
  return m ? `${m} min ${Math.round(s - 60 * m)} s` : `${Math.round(s)} s`;
}

async function refreshState() {
  if (!rig) return;
  const st = await rig.get("/v1/state");
  model.state = st;
  model.session = st.session;
  if (st.session.test !== model.test) await loadTest(st.session.test);
  render();
}

async function loadTest(name) {
  model.test = name;
  model.grid = [];
  if (!name) return;
  const t = await rig.get(`/v1/tests/${encodeURIComponent(name)}`);
  if (model.test === name && t) model.grid = t.grid.map(([label, x, y]) => ({ label, x, y }));
}

async function refreshLastHit() {
  if (!rig) return;
  const asked = ++lastHitAsked;
  const view = await rig.get("/v1/hits/last");
  if (asked !== lastHitAsked) return; // a later answer is on its way
  model.last = view;
  drawPlots();
}

function onEvent(kind, data) {
  if (kind === "hit") {
    model.verdict = { ...verdictOf(data), point: data.point };
    if (model.session) {
      Object.assign(model.session, { point: data.point, averages: data.averages, waiting: data.waiting });
    }
    chime(model.verdict.kind);
    render();
    refreshLastHit().catch(() => {});
    refreshState().catch(() => {});
  } else if (kind === "completed") {
    model.verdict = { kind: "complete", point: data.point, title: `${data.point} done`,
                      detail: `${data.averages} averages stored. On to the next point.` };
    chime("complete");
    render();
    refreshState().catch(() => {});
  } else if (kind === "cursor") {
    if ("armed" in data && model.session && data.test === model.test) {
      model.session = data;
      render();
    } else {
      refreshState().catch(() => {});
    }
  } else if (kind === "test_complete") {
    if (model.session) Object.assign(model.session, { complete: true, again: false, armed: false, tally: data });
    model.verdict = finishedVerdict(data, model.session ? model.session.point : null);
    chime("complete");
    render();
    refreshState().catch(() => {});
  } else if (kind === "device") {
    model.device = data;
    // Shown at once, in words; the rest of the state follows.
    if (model.session) {
      Object.assign(model.session, { state: data.state, detail: data.detail });
      if ("identified" in data) model.session.identified = data.identified;
    }
    render();
    refreshState().catch(() => {});
  } else if (kind === "message") {
    notice(data.text);
  }
}

function verdictOf(hit) {
  const peak = `peak ${num(hit.peak_force_n)} N, pulse ${num(hit.pulse_width_s * 1000)} ms`;
  if (hit.rejections.length) {
    const [code] = hit.rejections[0];
    return { kind: "rejected", title: REASON[code] || "Rejected",
             detail: hit.rejections.map(([, m]) => sentence(m)).join(" ") };
  }
  const warn = hit.warnings.map(([, m]) => sentence(m)).join(" ");
  if (hit.waiting) {
    return { kind: "waiting", title: "Keep this tap?", detail: `${cap(peak)}. ${warn}`.trim() };
  }
  if (hit.counted) {
    const of = model.session ? ` of ${model.session.required}` : "";
    return { kind: "counted", title: `Counted ${hit.averages}${of}`, detail: `${cap(peak)}. ${warn}`.trim() };
  }
  return { kind: "idle", title: "Tap not counted", detail: cap(peak) };
}

/** The rig's reason without its leading name ("double hit: …"), as a sentence. */
function sentence(message) {
  const i = message.indexOf(": ");
  const s = i > 0 && i < 20 ? message.slice(i + 2) : message;
  return cap(s.endsWith(".") ? s : `${s}.`);
}
const cap = (s) => (s ? s[0].toUpperCase() + s.slice(1) : s);
const num = (v) => (Number.isFinite(v) ? String(Number(v.toPrecision(3))) : "–");

// ---------------------------------------------------------------- drawing

function render() {
  const s = model.session;
  const required = s ? s.required : 0;
  $("point").textContent = s && s.point ? s.point : "–";
  $("test-button").textContent = s && s.test ? s.test : "choose a test";
  const dots = $("averages");
  dots.replaceChildren(...Array.from({ length: Math.min(required, 32) }, (_, i) => {
    const d = document.createElement("span");
    if (i < s.averages) d.className = "got";
    return d;
  }));
  $("avg-text").textContent = s && s.test ? `average ${s.averages} of ${required}` : "no test selected";
  const armed = $("armed");
  armed.dataset.armed = String(Boolean(s && s.armed));
  armed.textContent = s && s.armed ? "armed" : "not armed";
  const arm = $("arm");
  arm.dataset.armed = String(Boolean(s && s.armed));
  if (!arm.classList.contains("confirm")) arm.textContent = s && s.armed ? "Disarm" : "Arm";

  // A verdict belongs to its point: once the cursor moves on, say what to do at the new one.
  let shown = model.verdict;
  const closed = s && s.point && s.done.includes(s.point) && !s.again;
  const ended = shown.kind === "finished" && (!s || !shown.point || shown.point === s.point);
  if (closed && shown.kind !== "complete" && !ended) {
    shown = { kind: "idle", title: `${s.point} is measured`,
              detail: "Taps here are not stored. Measure it again to replace it; the stored one stays." };
  } else if (s && s.point && shown.point && shown.point !== s.point && shown.kind !== "complete") {
    shown = { kind: "idle", title: `Ready at ${s.point}`,
              detail: s.armed ? "Tap when you are ready." : "Arm the rig to count taps." };
  }
  const v = $("verdict");
  v.dataset.kind = shown.kind;
  $("verdict-title").textContent = shown.title;
  $("verdict-detail").textContent = shown.detail;

  const operator = model.state ? model.state.accept === "operator" : false;
  const undo = Boolean(s && s.can_undo);
  $("decide").hidden = !operator && !undo;
  for (const id of ["accept", "reject"]) {
    $(id).hidden = !operator;
    $(id).disabled = !(s && s.waiting);
  }
  $("undo").hidden = !undo;
  const finished = Boolean(s && s.complete && !s.again && s.tally);
  $("finished").hidden = !finished;
  if (finished) $("finished-summary").textContent = tallyText(s.tally);
  $("verdict").hidden = finished && shown.kind === "finished";
  $("remeasure").hidden = !(s && s.point && s.done.includes(s.point) && !s.again);
  $("remeasure").textContent = s && s.point ? `Measure ${s.point} again` : "Measure again";
  renderDevice();

  renderPlaces();
  renderGrid();
  renderHealth();
}

// A roving-hammer test that does not know where its sensors sit cannot name its driving
// point: ask for the places rather than let the taps pile up.
function renderPlaces() {
  const unplaced = (model.state && model.state.sensors_missing) || [];
  const el = $("places");
  el.hidden = unplaced.length === 0;
  el.textContent = unplaced.length === 0 ? "" :
    `Where ${unplaced.length > 1 ? "do" : "does"} ${unplaced.join(", ")} sit? This test does ` +
    "not know, so no tap can be matched to its driving point. Make the test again with each " +
    `sensor's place, e.g. taprigd run --sensor-at ${unplaced[0]}=B3/+z, or location in ` +
    "its [[channels]] table.";
}

function status(label) {
  const s = model.session;
  if (s && label === s.point && s.averages > 0) return "part";
  return s && s.done.includes(label) ? "done" : "todo";
}

function renderGrid() {
  const s = model.session;
  const total = model.grid.length;
  drawGrid($("grid"), model.grid, status, s ? s.point : null, pickPoint);
  drawGrid($("mini"), model.grid, status, s ? s.point : null, null);
  const done = s ? model.grid.filter((p) => s.done.includes(p.label)).length : 0;
  const part = s && s.averages > 0 && !s.done.includes(s.point) ? s.averages / s.required : 0;
  $("progress-done").style.width = total ? `${(100 * done) / total}%` : "0";
  $("progress-part").style.width = total ? `${(100 * part) / total}%` : "0";
  $("progress-text").textContent = total ? `${done} of ${total} done` : "";
  $("map").dataset.done = String(done);
}

/** The device's state at the top of the page, in words, beside the armed state. */
function renderDevice() {
  const s = model.session;
  const box = $("device-alert");
  if (!s || (s.state === "connected" && s.identified !== false)) { box.hidden = true; return; }
  const armed = s.armed ? "Armed" : "Not armed";
  const where = s.device ? ` (${s.device})` : "";
  let kind = "lost";
  let words;
  if (s.state === "connected") {
    kind = "waiting";
    words = `waiting for the device${where} to identify itself.`;
  } else if (!s.identified) {
    kind = "waiting";
    words = `waiting for the device${where}: ${s.detail || s.state}.`;
  } else {
    words = `device lost: ${s.detail || s.state}. Taps are not counted until it is back.`;
  }
  box.dataset.kind = kind;
  box.textContent = `${armed} · ${words}`;
  box.hidden = false;
}

function renderHealth() {
  const s = model.session;
  const st = model.state;
  const again = stream && stream.reconnects > 0 ? `, reconnected ${stream.reconnects}×` : "";
  $("h-stream").textContent = model.link === "live" ? `live${again}`
    : `${model.link}${model.linkDetail ? ` (${model.linkDetail})` : ""}${again}`;
  const dev = st && st.device;
  const why = model.device && model.device.state !== "connected" && model.device.detail
    ? ` (${model.device.detail})` : "";
  $("h-device").textContent = s
    ? `${s.state}${why}${dev ? ` · ${dev.id}, firmware ${dev.firmware}` : ""}` : "–";
  $("h-rate").textContent = s && s.rate_hz ? `${num(s.rate_hz / 1000)} kHz` : "–";
  const l = s && s.link;
  $("h-link").textContent = l ? `${l.crc_errors} bad frames, ${l.samples_lost} samples lost, `
    + `${l.reconnects} reconnects` : "–";
  $("h-accept").textContent = st ? (st.accept === "operator" ? "you decide each tap" : "automatic") : "–";
}

function drawPlots() {
  const v = model.last;
  const ids = ["plot-force", "plot-response", "plot-frf", "plot-coherence"];
  if (!v) {
    for (const id of ids) blank($(id), "no tap yet");
    return;
  }
  const chans = (model.state && model.state.channels) || [];
  const labels = Object.keys(v.traces);
  const force = (chans.find((c) => c.role === "force") || { label: labels[0] }).label;
  const responses = labels.filter((l) => l !== force);
  const ms = v.duration_s * 1000;
  const trace = (label, colour) => {
    const t = v.traces[label];
    const n = t.min.length;
    return { x: t.min.map((_, i) => (i * ms) / n), lo: t.min, hi: t.max, colour };
  };
  // The force is drawn around its pulses only, so a double hit is plainly two pulses.
  const z = v.force_zoom;
  const zx = z ? z.min.map((_, i) => 1000 * (z.start_s + (i * (z.end_s - z.start_s)) / z.min.length)) : [];
  // Zoomed in, a bucket holds a sample or two: a line through the buckets shows the shape.
  const fs = z ? [{ x: zx, lo: z.min, hi: z.max, colour: FORCE_COLOUR },
                  { x: zx, y: z.min.map((lo, i) => (lo + z.max[i]) / 2), colour: FORCE_COLOUR }]
    : [trace(force, FORCE_COLOUR)];
  const [f0, f1] = extent([fs[0].lo, fs[0].hi]);
  const [t0, t1] = z ? [1000 * z.start_s, 1000 * z.end_s] : [0, ms];
  plot($("plot-force"), { x0: t0, x1: t1, y0: f0, y1: f1, xunit: "ms", series: fs });
  $("plot-force").dataset.span = `${t0} ${t1}`;
  $("force-note").textContent = `peak ${num(v.peak_force_n)} N · ${num(v.pulse_width_s * 1000)} ms`;
  const rs = responses.map((l, i) => trace(l, COLOURS[i % COLOURS.length]));
  const [r0, r1] = extent(rs.flatMap((s) => [s.lo, s.hi]));
  plot($("plot-response"), { x0: 0, x1: ms, y0: r0, y1: r1, xunit: "ms", series: rs });
  const key = $("response-key");
  key.replaceChildren(...responses.map((l, i) => {
    const k = document.createElement("span");
    k.textContent = ` ■ ${l}`;
    k.style.color = COLOURS[i % COLOURS.length];
    return k;
  }));
  const sp = v.spectra;
  if (sp) {
    const f = sp.freq_hz;
    // The analysis band: where the hammer put energy in (the rig cuts the spectra to it).
    const [low, top] = v.band_hz || [0, f[f.length - 1] || 1];
    const mags = sp.h1_abs.map((y, i) => ({ x: f, y, colour: COLOURS[i % COLOURS.length] }));
    const [m0, m1] = extent(sp.h1_abs, { positive: true });
    plot($("plot-frf"), { x0: low, x1: top, y0: m0, y1: m1, log: true, xunit: "Hz", series: mags });
    const cohs = sp.coherence.map((y, i) => ({ x: f, y, colour: COLOURS[i % COLOURS.length] }));
    plot($("plot-coherence"), { x0: low, x1: top, y0: 0, y1: 1.05, xunit: "Hz", series: cohs });
    $("plot-frf").dataset.band = `${low} ${top}`;
    $("frf-note").textContent = `${v.point} · ${v.averages} average${v.averages === 1 ? "" : "s"}`;
  } else {
    blank($("plot-frf"), "no average counted yet at this point");
    blank($("plot-coherence"), "no average counted yet at this point");
    $("frf-note").textContent = "";
  }
  for (const id of ids) $(id).dataset.stamp = String(v.first_index);
}

function notice(text) {
  const n = $("notice");
  n.textContent = text;
  n.hidden = !text;
  clearTimeout(noticeTimer);
  if (text) noticeTimer = setTimeout(() => { n.hidden = true; }, 8000);
}

// ---------------------------------------------------------------- controls

async function act(action, fields = {}, button = null) {
  if (!rig) return;
  if (button) button.disabled = true;
  try {
    const r = await rig.command(action, fields);
    if (!r.ok) notice(cap(r.body.message || `${action} failed (HTTP ${r.status})`));
    else if (r.body.state) {
      model.session = r.body.state;
      const st = r.body.state;
      if (["goto", "next", "previous", "select"].includes(action)) {
        // The operator moved: what was said of the last point is no longer the news.
        model.verdict = { kind: "idle", point: st.point, title: `Ready at ${st.point}`,
                          detail: st.armed ? "Tap when you are ready." : "Arm the rig to count taps." };
      } else if (action === "undo") {
        model.verdict = { kind: "idle", point: st.point, title: "Tap taken back",
                          detail: `${st.averages} of ${st.required} averages at ${st.point}.` };
        refreshLastHit().catch(() => {});
      } else if (action === "remeasure") {
        model.verdict = { kind: "idle", point: st.point, title: `Measuring ${st.point} again`,
                          detail: `${st.armed ? "Tap" : "Arm the rig, then tap"}; the stored version stays until this one is complete.` };
      }
      if (model.session.test !== model.test) await loadTest(model.session.test);
      render();
    }
  } catch (e) {
    notice(`The rig did not answer (${e.message || e}); check the Wi-Fi.`);
  } finally {
    if (button) button.disabled = false;
    render();
  }
}

/** Actions that throw away the averages at this point need a second tap to go ahead. */
function confirmed(key, button, words) {
  const s = model.session;
  if (!s || s.averages === 0) return true;
  if (pending && pending.key === key && performance.now() < pending.until) {
    clearPending();
    return true;
  }
  clearPending();
  pending = { key, until: performance.now() + CONFIRM_MS, button, text: button ? button.textContent : "" };
  if (button) { button.classList.add("confirm"); button.textContent = "again?"; }
  notice(words);
  pending.timer = setTimeout(clearPending, CONFIRM_MS);
  return false;
}

function clearPending() {
  if (!pending) return;
  clearTimeout(pending.timer);
  if (pending.button) { pending.button.classList.remove("confirm"); pending.button.textContent = pending.text; }
  pending = null;
}

function drops(what) {
  const s = model.session;
  const n = s ? s.averages : 0;
  return `Tap ${what} again to drop the ${n} average${n === 1 ? "" : "s"} at ${s ? s.point : "this point"}.`;
}

function pickPoint(label) {
  const s = model.session;
  if (!s || label === s.point) return;
  if (confirmed(`goto ${label}`, null, `Tap ${label} again to go there; it drops the ${s.averages} averages at ${s.point}.`)) {
    notice("");
    act("goto", { point: label });
  }
}

function wireControls() {
  $("pair-form").addEventListener("submit", (e) => {
    e.preventDefault();
    const t = tokenFrom($("pair-input").value);
    if (!t) { $("pair-error").textContent = "That is not a pairing address or token."; return; }
    saveToken(t);
    $("pair-input").value = "";
    paired(t);
  });
  $("accept").addEventListener("click", (e) => act("accept", {}, e.currentTarget));
  $("undo").addEventListener("click", (e) => act("undo", {}, e.currentTarget));
  $("remeasure").addEventListener("click", (e) => {
    const s = model.session;
    if (s && s.point) act("remeasure", { point: s.point }, e.currentTarget);
  });
  $("finished-tests").addEventListener("click", chooseTest);
  $("reject").addEventListener("click", (e) => act("reject", {}, e.currentTarget));
  $("arm").addEventListener("click", (e) => {
    const s = model.session;
    act(s && s.armed ? "disarm" : "arm", {}, e.currentTarget);
  });
  for (const [id, action] of [["previous", "previous"], ["next", "next"], ["redo", "redo"]]) {
    $(id).addEventListener("click", (e) => {
      const b = e.currentTarget;
      const what = { previous: "◀", next: "▶", redo: "Redo" }[id];
      if (confirmed(id, b, drops(what))) { notice(""); act(action, {}, b); }
    });
  }
  $("test-button").addEventListener("click", chooseTest);
  $("tests-close").addEventListener("click", () => $("tests").close());
  $("unpair").addEventListener("click", () => { forgetToken(); unpaired(""); });
  $("sound").addEventListener("click", () => setSound(!audio));
  if (localStorage.getItem("taprig.sound") === "on") {
    // A browser lets a page make sound only after a touch: start it at the first one.
    addEventListener("pointerdown", () => setSound(true), { once: true });
  }
  addEventListener("resize", () => drawPlots());
}

async function chooseTest() {
  if (!rig) return;
  const list = await rig.get("/v1/tests").catch(() => null);
  const box = $("test-list");
  box.replaceChildren(...(list ? list.tests : []).map((t) => {
    const b = document.createElement("button");
    b.type = "button";
    b.className = "big";
    b.textContent = `${t.name} · ${t.grid.length} points`;
    if (model.session && t.name === model.session.test) b.setAttribute("aria-current", "true");
    b.addEventListener("click", () => { $("tests").close(); act("select", { test: t.name }); });
    return b;
  }));
  if (!box.children.length) box.textContent = "The rig has no test yet.";
  $("tests").showModal();
}

// ---------------------------------------------------------------- sound

let audio = null;

function setSound(on) {
  if (on && !audio) audio = new AudioContext();
  if (!on && audio) { audio.close(); audio = null; }
  localStorage.setItem("taprig.sound", on ? "on" : "off");
  const b = $("sound");
  b.setAttribute("aria-pressed", String(on));
  b.title = on ? "sound on: tap to silence" : "sound off: tap for a chime on each tap";
}

/** Rising notes for a counted tap, a low buzz for a rejected one, one note to decide. */
function chime(kind) {
  if (!audio) return;
  const notes = { counted: [660, 880], complete: [660, 880, 1175], rejected: [196, 165],
                  waiting: [587] }[kind];
  if (!notes) return;
  let t = audio.currentTime + 0.01;
  for (const f of notes) {
    const osc = audio.createOscillator();
    const gain = audio.createGain();
    osc.type = kind === "rejected" ? "square" : "sine";
    osc.frequency.value = f;
    gain.gain.setValueAtTime(0.0001, t);
    gain.gain.exponentialRampToValueAtTime(0.25, t + 0.015);
    gain.gain.exponentialRampToValueAtTime(0.0001, t + 0.16);
    osc.connect(gain).connect(audio.destination);
    osc.start(t);
    osc.stop(t + 0.17);
    t += 0.17;
  }
}

start();
