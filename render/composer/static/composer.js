// The composer page: controls built from /state, previews from /preview, newest wins.
"use strict";

const PREVIEW_SIDE = 256;   // longer side after a change
const DRAG_SIDE = 128;      // longer side while dragging (quicker)
const DEGREES_PER_PIXEL = 0.5;

const page = { controls: {}, sent: 0, shown: 0, inFlight: 0, previewId: null, curve: null, dragging: null };

function $(id) { return document.getElementById(id); }

function settings() {
  const values = {};
  for (const [key, control] of Object.entries(page.controls)) values[key] = control.input.value;
  return values;
}

async function post(path, body) {
  const response = await fetch(path, { method: "POST", body: JSON.stringify(body),
                                       headers: { "Content-Type": "application/json" } });
  return { status: response.status, body: await response.json() };
}

function showError(message, key) {
  for (const control of Object.values(page.controls)) {
    control.box.classList.remove("bad");
    control.error.textContent = "";
  }
  $("message").textContent = "";
  if (!message) return;
  const control = key && page.controls[key];
  if (control) {
    control.box.classList.add("bad");
    control.error.textContent = message;
  } else {
    $("message").textContent = message;
  }
}

async function requestPreview(side) {
  const number = ++page.sent;
  $("status").textContent = "rendering...";
  page.inFlight += 1;
  let reply;
  try {
    reply = await post("/preview", { settings: settings(), side: side });
  } finally {
    page.inFlight -= 1;
  }
  // Newest wins: an answer to an older request is dropped (the server stops those too).
  if (number !== page.sent || reply.status === 409) return;
  if (reply.status !== 200) {
    showError(reply.body.error, reply.body.key);
    $("status").textContent = "not rendered: fix the value marked in red";
    return;
  }
  page.shown = number;
  showError("");
  const preview = reply.body;
  const image = $("preview");
  image.onload = () => {
    image.dataset.previewId = preview.id;
    page.previewId = preview.id;
    page.curve = preview.curve;
    drawCurve(preview);
    $("status").textContent = `${preview.width}x${preview.height} in ` +
      `${preview.seconds.toFixed(2)} s of server time`;
  };
  image.src = `/preview/${preview.id}.png`;
}

function drawCurve(preview) {
  const overlay = $("overlay");
  overlay.setAttribute("viewBox", `0 0 ${preview.width} ${preview.height}`);
  const line = $("curve");
  const wanted = $("show-curve").checked && page.curve;
  line.setAttribute("points", wanted ? page.curve.map(p => p.join(",")).join(" ") : "");
}

function buildControls(table) {
  const form = $("controls");
  const groups = {};
  for (const spec of table) {
    if (!groups[spec.group]) {
      const fieldset = document.createElement("fieldset");
      fieldset.innerHTML = `<legend>${spec.group}</legend>`;
      form.appendChild(fieldset);
      groups[spec.group] = fieldset;
    }
    const box = document.createElement("div");
    box.className = "control";
    box.dataset.key = spec.key;
    box.title = `${spec.meaning} Allowed: ${spec.allowed}`;
    const label = document.createElement("label");
    label.textContent = spec.key + " ";
    const unit = document.createElement("span");
    unit.className = "unit";
    unit.textContent = spec.unit && spec.unit !== "-" ? spec.unit : "";
    label.appendChild(unit);
    let input;
    if (spec.kind === "choice") {
      input = document.createElement("select");
      for (const choice of spec.choices) input.add(new Option(choice, choice));
      input.addEventListener("change", () => requestPreview(PREVIEW_SIDE));
    } else {
      input = document.createElement("input");
      input.type = "text";
      let timer = null;
      input.addEventListener("input", () => {
        clearTimeout(timer);
        timer = setTimeout(() => requestPreview(PREVIEW_SIDE), 150);
      });
    }
    input.name = spec.key;
    input.value = spec.value;
    label.htmlFor = input.id = "control-" + spec.key.replace(/\./g, "-");
    const error = document.createElement("p");
    error.className = "error";
    box.append(label, input, error);
    groups[spec.group].appendChild(box);
    page.controls[spec.key] = { input: input, box: box, error: error };
  }
}

function orbit(event) {
  const drag = page.dragging;
  const inclination = page.controls["observer.inclination"].input;
  const azimuth = page.controls["observer.azimuth"].input;
  const dx = event.clientX - drag.x, dy = event.clientY - drag.y;
  const newInclination = Math.min(180, Math.max(0, drag.inclination - dy * DEGREES_PER_PIXEL));
  let newAzimuth = drag.azimuth - dx * DEGREES_PER_PIXEL;
  newAzimuth = ((newAzimuth + 180) % 360 + 360) % 360 - 180;
  inclination.value = newInclination.toFixed(1);
  azimuth.value = newAzimuth.toFixed(1);
  if (page.inFlight === 0) requestPreview(DRAG_SIDE);   // coarse frames, one at a time
}

function setUpDragging() {
  const frame = $("frame");
  frame.addEventListener("pointerdown", event => {
    const inclination = parseFloat(page.controls["observer.inclination"].input.value);
    const azimuth = parseFloat(page.controls["observer.azimuth"].input.value);
    if (!isFinite(inclination) || !isFinite(azimuth)) return;
    page.dragging = { x: event.clientX, y: event.clientY, inclination: inclination,
                      azimuth: azimuth };
    frame.setPointerCapture(event.pointerId);
    frame.classList.add("dragging");
  });
  frame.addEventListener("pointermove", event => {
    if (page.dragging) orbit(event); else probe(event);
  });
  const release = () => {
    if (!page.dragging) return;
    page.dragging = null;
    frame.classList.remove("dragging");
    requestPreview(PREVIEW_SIDE);
  };
  frame.addEventListener("pointerup", release);
  frame.addEventListener("pointercancel", release);
}

let probeTimer = null;
function probe(event) {
  const image = $("preview");
  if (!page.previewId || !image.naturalWidth) return;
  // The image is drawn with object-fit: contain inside the frame.
  const box = image.getBoundingClientRect();
  const scale = Math.min(box.width / image.naturalWidth, box.height / image.naturalHeight);
  const left = box.left + (box.width - image.naturalWidth * scale) / 2;
  const top = box.top + (box.height - image.naturalHeight * scale) / 2;
  const x = Math.floor((event.clientX - left) / scale), y = Math.floor((event.clientY - top) / scale);
  if (x < 0 || y < 0 || x >= image.naturalWidth || y >= image.naturalHeight) return;
  clearTimeout(probeTimer);
  probeTimer = setTimeout(async () => {
    const response = await fetch(`/probe?id=${page.previewId}&x=${x}&y=${y}`);
    if (response.status !== 200) return;
    const p = await response.json();
    $("probe-m").textContent = `${p.alpha.toFixed(3)}, ${p.beta.toFixed(3)} M`;
    $("probe-uas").textContent = `${p.alpha_uas.toFixed(2)}, ${p.beta_uas.toFixed(2)} \u00b5as`;
    $("probe-fate").textContent = p.fate;
    $("probe-crossings").textContent = p.crossings.length ? p.crossings.map(c =>
      `n=${c.order}: r=${c.r === null ? "-" : c.r.toFixed(3)} M, ` +
      `g=${c.g === null ? "-" : c.g.toFixed(4)}`).join("; ") : "none on the disk";
  }, 40);
}

async function save() {
  const reply = await post("/save", { settings: settings(), overwrite: $("overwrite").checked });
  if (reply.status === 200) {
    showError("");
    $("save-result").textContent = `saved ${reply.body.path}`;
  } else {
    $("save-result").textContent = "";
    showError(reply.body.error, reply.body.key);
  }
}

async function renderStill() {
  const reply = await post("/still", { settings: settings(), overwrite: $("overwrite").checked });
  if (reply.status !== 202) {
    $("still-result").textContent = reply.body.error;
    return;
  }
  $("still-result").textContent = "rendering the still...";
  $("still-image").hidden = true;
  const bar = $("still-progress");
  bar.hidden = false;
  bar.value = 0;
  const poll = async () => {
    const status = await (await fetch("/still")).json();
    if (status.total) { bar.max = status.total; bar.value = status.done; }
    if (status.state === "rendering") { setTimeout(poll, 300); return; }
    bar.hidden = true;
    $("still-result").textContent = status.state === "done" ? `wrote ${status.message}`
                                                            : status.message;
    if (status.state === "done" && status.image) {
      const image = $("still-image");
      image.src = `/output/${encodeURIComponent(status.image)}?t=${Date.now()}`;
      image.hidden = false;
    }
  };
  poll();
}

async function start() {
  const state = await (await fetch("/state")).json();
  $("source").textContent = `${state.source} \u2192 ${state.output_dir}/`;
  buildControls(state.controls);
  setUpDragging();
  $("show-curve").addEventListener("change", () => page.curve !== undefined &&
    drawCurve({ width: $("preview").naturalWidth, height: $("preview").naturalHeight }));
  $("save").addEventListener("click", save);
  $("still").addEventListener("click", renderStill);
  requestPreview(PREVIEW_SIDE);
}

start();
