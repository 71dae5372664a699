// The "new test" form: a name, the averages, the grid (CSV as the rig takes it, or made here
// from rows × columns and a spacing) and where each response sensor sits. It sends the
// create-test request the rig's API already takes (POST /v1/tests) and checks nothing itself:
// the rig's 400 names the field (and the grid's line), which is shown beside that field.
// Nothing typed is cleared by a refusal; after a success only the name is.

const $ = (id) => document.getElementById(id);
const AXES = ["+z", "-z", "+x", "-x", "+y", "-y"];
const UNIT_M = { mm: 0.001, cm: 0.01, m: 1 };
// Which part of the form a refusal belongs to, by the field path the rig's message starts with.
const FIELD_OF = [["body.name", "name"], ["body.averages", "averages"], ["body.grid", "grid"],
                  ["body.outline", "grid"], ["body.sensor", "sensors"], ["body.reference", "sensors"]];
const PARTS = ["name", "averages", "grid", "sensors", "form"];

let ctx = null; // {rig, channels, created(name)}

/** Row labels A..Z, then AA, AB, ... (spreadsheet style). */
export function rowLabel(i) {
  let s = "";
  for (let n = i + 1; n > 0; n = Math.floor((n - 1) / 26)) s = String.fromCharCode(65 + ((n - 1) % 26)) + s;
  return s;
}

/** Grid CSV (metres) of `rows` × `cols` points, row A on top (plan view: y up), column 1 at x = 0. */
export function gridCsv(rows, cols, across, down) {
  const m = (v) => String(Number(v.toFixed(6)));
  const lines = ["label,x,y,z"];
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) lines.push(`${rowLabel(r)}${c + 1},${m(c * across)},${m((rows - 1 - r) * down)},0`);
  }
  return `${lines.join("\n")}\n`;
}

/** Open the form. channels: the rig's [{label, role}]; created(name): after the rig stored it. */
export function openMaker(rig, channels, created) {
  ctx = { rig, channels, created };
  const box = $("mk-sensors");
  const responses = channels.filter((c) => c.role !== "force").map((c) => c.label);
  // Rebuild the sensor rows only when the channels changed, so what was typed stays.
  if (box.dataset.labels !== responses.join(" ")) {
    box.replaceChildren(...responses.map(sensorRow));
    box.dataset.labels = responses.join(" ");
  }
  $("maker").showModal();
}

/** Fill the grid (and the name, if empty) from a stored test: to make it again, e.g. with places. */
export function copyTest(test) {
  $("mk-grid").value = `label,x,y,z,direction\n${test.grid.map((p) => [p[0], p[1], p[2], p[3], p[4] || "+z"].join(",")).join("\n")}\n`;
  if (!$("mk-name").value) $("mk-name").value = `${test.name}-2`.slice(0, 64);
}

function sensorRow(label) {
  const row = document.createElement("div");
  row.className = "sensor";
  const name = document.createElement("span");
  name.textContent = label;
  const at = document.createElement("input");
  Object.assign(at, { id: `mk-at-${label}`, placeholder: "B3 or x,y,z m", autocomplete: "off",
                      spellcheck: false });
  at.setAttribute("autocapitalize", "characters");
  at.setAttribute("aria-label", `${label}: grid point or x,y,z in metres`);
  const dir = document.createElement("select");
  dir.id = `mk-dir-${label}`;
  dir.setAttribute("aria-label", `${label}: direction`);
  dir.replaceChildren(...AXES.map((a) => new Option(a, a)));
  row.append(name, at, dir);
  return row;
}

function fill() {
  const n = (id) => Number($(id).value);
  const unit = UNIT_M[$("mk-unit").value];
  const [rows, cols, across, down] = [n("mk-rows"), n("mk-cols"), n("mk-across") * unit, n("mk-down") * unit];
  const ok = Number.isInteger(rows) && Number.isInteger(cols) && rows >= 1 && cols >= 1
    && rows * cols <= 4096 && across > 0 && down >= 0;
  show("grid", ok ? "" : "Rows and columns: whole numbers, at most 4096 points; spacing above 0.");
  if (ok) $("mk-grid").value = gridCsv(rows, cols, across, down || across);
}

/** The create-test request of what the form holds; empty fields are left out. */
function request() {
  const body = { name: $("mk-name").value.trim(), grid_csv: $("mk-grid").value, roving_mode: "hammer" };
  const averages = $("mk-averages").value.trim();
  if (averages) body.averages = Number(averages);
  const sensors = {};
  for (const label of ($("mk-sensors").dataset.labels || "").split(" ").filter(Boolean)) {
    const at = $(`mk-at-${label}`).value.trim();
    if (at) sensors[label] = { at, direction: $(`mk-dir-${label}`).value };
  }
  if (Object.keys(sensors).length) body.sensors = sensors;
  return body;
}

function show(part, message) {
  const el = $(`mk-${part}-error`);
  el.textContent = message;
  el.hidden = !message;
}

/** A refusal beside the part of the form it names; a grid line is selected in the text. */
function refused(status, message) {
  let part = status === 409 ? "name" : "form";
  for (const [prefix, p] of FIELD_OF) if (message.startsWith(prefix)) { part = p; break; }
  show(part, message.replace(/^body\.[\w.]+: /, ""));
  $(`mk-${part}-error`).dataset.field = message.split(":")[0];
  $(`mk-${part}-error`).scrollIntoView({ block: "nearest" });
  const line = /line (\d+)/.exec(message);
  if (part === "grid" && line) {
    const text = $("mk-grid").value;
    let start = 0;
    for (let i = 1; i < Number(line[1]) && start >= 0; i++) start = text.indexOf("\n", start) + 1 || -1;
    if (start >= 0) {
      const end = text.indexOf("\n", start);
      $("mk-grid").setSelectionRange(start, end < 0 ? text.length : end);
      $("mk-grid").dataset.line = line[1];
    }
  }
}

async function submit(e) {
  e.preventDefault();
  if (!ctx) return;
  for (const p of PARTS) show(p, "");
  delete $("mk-grid").dataset.line;
  const button = $("maker-create");
  button.disabled = true;
  try {
    const body = request();
    const r = await ctx.rig.post("/v1/tests", body);
    if (!r.ok) { refused(r.status, String(r.body.message || `HTTP ${r.status}`)); return; }
    $("mk-name").value = "";
    $("maker").close();
    await ctx.created(body.name);
  } catch (err) {
    show("form", `The rig did not answer (${err.message || err}); check the Wi-Fi and try again.`);
  } finally {
    button.disabled = false;
  }
}

export function wireMaker() {
  $("maker-form").addEventListener("submit", submit);
  $("mk-fill").addEventListener("click", fill);
  $("maker-cancel").addEventListener("click", () => $("maker").close());
}
