// The tuning page: controls -> the server renders what is on screen -> drawn at 1:1.
// Everything here talks only to the server that served it.
"use strict";

const token = new URLSearchParams(location.search).get("token") || "";
// this page's own count of requests: another tab, or this one reloaded, counts apart
const client = Math.random().toString(36).slice(2) + Date.now().toString(36);
const $ = (id) => document.getElementById(id);
const state = {
  start: {}, current: {}, groups: [], showing: "B", zoom: 1,
  viewSeq: 0, viewDrawn: -1, viewAbort: null, viewTimer: null,
  figSeq: 0, figShown: -1, figAbort: null, figTimer: null,
  size: [0, 0], checked: 0,
};

function call(path, body, signal) {
  return fetch(path, {
    method: "POST", signal, cache: "no-store",
    headers: { "Content-Type": "application/json", "X-Token": token },
    body: JSON.stringify(body),
  });
}

function showMessage(text) {
  const m = $("message");
  m.textContent = text || "";
  m.hidden = !text;
}

// ------------------------------------------------------------------ values

function changed() {
  // what differs from the starting preset, table by table (what a saved preset holds)
  const out = {};
  for (const [table, kv] of Object.entries(state.current)) {
    for (const [key, value] of Object.entries(kv)) {
      if (value !== state.start[table][key]) (out[table] ||= {})[key] = value;
    }
  }
  return out;
}

function shownValues() {
  return state.showing === "A" ? null : changed();
}

function markChanged() {
  for (const el of document.querySelectorAll(".control")) {
    const { table, key } = el.dataset;
    el.classList.toggle("changed", state.current[table][key] !== state.start[table][key]);
  }
}

// ------------------------------------------------------------------ the view

function visibleBox() {
  const vp = $("viewport"), z = state.zoom;
  const [w, h] = state.size;
  const left = Math.max(0, Math.floor(vp.scrollLeft / z));
  const top = Math.max(0, Math.floor(vp.scrollTop / z));
  const right = Math.min(w || 1 << 16, Math.ceil((vp.scrollLeft + vp.clientWidth) / z));
  const bottom = Math.min(h || 1 << 16, Math.ceil((vp.scrollTop + vp.clientHeight) / z));
  return { top, bottom, left, right };
}

function setSize(w, h) {
  if (state.size[0] === w && state.size[1] === h) return;
  state.size = [w, h];
  const c = $("view");
  c.width = w; c.height = h;
  applyZoom();
}

function applyZoom() {
  const c = $("view"), [w, h] = state.size;
  c.style.width = `${w * state.zoom}px`;
  c.style.height = `${h * state.zoom}px`;
}

async function requestView() {
  const seq = ++state.viewSeq;
  if (state.viewAbort) state.viewAbort.abort();  // the newest request wins
  const abort = new AbortController();
  state.viewAbort = abort;
  const box = visibleBox();
  const started = performance.now();
  try {
    const r = await call("/api/view", { client, seq, values: shownValues(), ...box }, abort.signal);
    if (r.status === 204) return;  // dropped for a newer one
    if (!r.ok) { const e = await r.json(); showMessage(e.error); markBad(e.error); return; }
    const head = JSON.parse(r.headers.get("X-View"));
    const data = new Uint8ClampedArray(await r.arrayBuffer());
    if (seq < state.viewDrawn) return;
    state.viewDrawn = seq;
    const first = state.size[0] === 0;
    setSize(head.width, head.height);
    if (head.rows > 0 && head.columns > 0) {
      $("view").getContext("2d").putImageData(new ImageData(data, head.columns, head.rows), head.left, head.top);
    }
    showMessage("");
    markBad(null);
    $("status").textContent = `view ${head.columns}x${head.rows} in ${head.ms} ms (${Math.round(performance.now() - started)} ms to screen)`;
    document.body.dataset.viewSeq = String(seq);
    if (first) requestView();  // now that the size is known, the visible part
  } catch (err) {
    if (err.name !== "AbortError") showMessage(`the server did not answer: ${err.message}`);
  }
}

function scheduleView(delay) {
  clearTimeout(state.viewTimer);
  state.viewTimer = setTimeout(requestView, delay);
}

// ------------------------------------------------------------------ figures

const pct = (v, digits = 2) => (v === null || v === undefined ? "-" : `${(100 * v).toFixed(digits)} %`);

async function requestFigures() {
  const seq = ++state.figSeq;
  if (state.figAbort) state.figAbort.abort();
  const abort = new AbortController();
  state.figAbort = abort;
  try {
    const r = await call("/api/figures", { client, seq, values: shownValues() }, abort.signal);
    if (r.status === 204) return;
    const f = await r.json();
    if (!r.ok) { showMessage(f.error); return; }
    if (seq < state.figShown) return;
    state.figShown = seq;
    $("light-kept").textContent = pct(f.light_kept, 3) + (f.target !== 1 ? ` (aim ${pct(f.target, 1)})` : "");
    $("plain-multiply").textContent = pct(f.plain_multiply, 1);
    $("contrast-18").textContent = pct(f.contrast_18, 1);
    $("contrast-90").textContent = pct(f.contrast_90, 1);
    $("local-p99").textContent = pct(f.local_p99, 2);
    $("output").textContent = `${f.output[0]}x${f.output[1]}, cell ${f.cell[0]}x${f.cell[1]}`;
    $("figures-ms").textContent = `${f.ms} ms`;
    const ul = $("warnings");
    ul.replaceChildren(...f.warnings.map((w) => Object.assign(document.createElement("li"), { textContent: w })));
    $("mask").src = f.mask_png;
    drawCurves(f.curves);
    document.body.dataset.figuresSeq = String(seq);
  } catch (err) {
    if (err.name !== "AbortError") showMessage(`the server did not answer: ${err.message}`);
  }
}

function scheduleFigures(delay) {
  clearTimeout(state.figTimer);
  state.figTimer = setTimeout(requestFigures, delay);
}

const CHANNEL_COLOURS = { R: "#ff6b6b", G: "#6bdc7a", B: "#6b9dff" };

function drawCurves(curves) {
  const c = $("curves"), g = c.getContext("2d");
  const w = c.width, h = c.height, pad = 24;
  g.clearRect(0, 0, w, h);
  let top = 1;
  for (const ch of curves.channels) for (const v of ch.lift) top = Math.max(top, v);
  const X = (x) => pad + x * (w - 2 * pad), Y = (y) => h - pad - (y / top) * (h - 2 * pad);
  g.strokeStyle = "#343844"; g.lineWidth = 1;
  g.strokeRect(pad, pad, w - 2 * pad, h - 2 * pad);
  g.setLineDash([3, 3]); g.beginPath(); g.moveTo(X(0), Y(0)); g.lineTo(X(1), Y(1)); g.stroke(); g.setLineDash([]);
  g.fillStyle = "#9aa0aa"; g.font = "11px sans-serif";
  g.fillText("input 0 .. 1", pad, h - 6); g.fillText(`out ${top.toFixed(2)}`, 2, pad - 8);
  curves.channels.forEach((ch, i) => {
    const colour = ch.label.length === 3 ? "#e6e6e6" : (CHANNEL_COLOURS[ch.label[0]] || "#e6e6e6");
    for (const [name, dash] of [["lift", []], ["cut", [5, 3]]]) {
      g.strokeStyle = colour; g.setLineDash(dash); g.lineWidth = 1.5; g.beginPath();
      ch[name].forEach((y, k) => { const x = curves.x[k]; k ? g.lineTo(X(x), Y(y)) : g.moveTo(X(x), Y(y)); });
      g.stroke();
    }
    g.setLineDash([]); g.fillStyle = colour;
    g.fillText(`${ch.label}: mean ${ch.mu.toFixed(3)}, ${ch.curve}`, pad + 4, pad + 12 + 13 * i);
  });
}

// ------------------------------------------------------------------ controls

function markBad(error) {
  for (const el of document.querySelectorAll(".control")) {
    const hit = error && (error.includes(`[${el.dataset.table}] ${el.dataset.key} `) || error.includes(` ${el.dataset.key} must`));
    el.classList.toggle("bad", Boolean(hit));
  }
}

function changedBy(table, key, value) {
  state.current[table][key] = value;
  markChanged();
  if (state.showing === "A") setShowing("B");
  scheduleView(0);
  scheduleFigures(120);
}

function buildControl(table, item) {
  const row = document.createElement("div");
  row.className = "control";
  row.dataset.table = table; row.dataset.key = item.key;
  const id = `c-${table}-${item.key}`;
  const label = Object.assign(document.createElement("label"), { htmlFor: id, textContent: item.key.replaceAll("_", " "), title: `[${table}] ${item.key}` });
  row.append(label);
  const value = item.value;
  if (item.kind === "number") {
    const slider = Object.assign(document.createElement("input"), { type: "range", min: item.min, max: item.max, step: item.step, id });
    const box = Object.assign(document.createElement("input"), { type: "number", min: item.min, max: item.max, step: "any" });
    box.setAttribute("aria-label", `${item.key} value`);
    slider.value = value ?? item.min; box.value = value ?? "";
    if (value === null) box.placeholder = "not set";
    slider.addEventListener("input", () => { box.value = slider.value; changedBy(table, item.key, Number(slider.value)); });
    box.addEventListener("change", () => {
      const v = box.value.trim() === "" ? null : Number(box.value);
      if (v !== null) slider.value = v;
      changedBy(table, item.key, v === null || Number.isNaN(v) ? (box.value.trim() === "" ? null : box.value) : v);
    });
    row.append(slider, box);
  } else if (item.kind === "bool") {
    const box = Object.assign(document.createElement("input"), { type: "checkbox", id, checked: Boolean(value) });
    box.addEventListener("change", () => changedBy(table, item.key, box.checked));
    row.append(box, document.createElement("span"));
  } else if (item.kind === "choice") {
    const select = Object.assign(document.createElement("select"), { id });
    for (const choice of item.choices) select.append(new Option(String(choice), String(choice), false, choice === value));
    select.addEventListener("change", () => {
      const v = item.choices.find((c) => String(c) === select.value);
      changedBy(table, item.key, v);
    });
    row.append(select);
  } else {
    const box = Object.assign(document.createElement("input"), { type: "text", id, value: value ?? "", spellcheck: false });
    if (value === null) box.placeholder = "not set";
    box.addEventListener("change", () => changedBy(table, item.key, box.value.trim() === "" ? null : box.value.trim()));
    row.append(box);
  }
  if (item.hint) row.append(Object.assign(document.createElement("div"), { className: "hint", textContent: item.hint }));
  return row;
}

function buildControls(groups) {
  const form = $("controls");
  form.replaceChildren();
  for (const group of groups) {
    const set = document.createElement("fieldset");
    set.append(Object.assign(document.createElement("legend"), { textContent: group.heading }));
    state.start[group.table] = {}; state.current[group.table] = {};
    for (const item of group.controls) {
      state.start[group.table][item.key] = item.value;
      state.current[group.table][item.key] = item.value;
      set.append(buildControl(group.table, item));
    }
    form.append(set);
  }
}

function reset() {
  buildControls(state.groups);  // the starting preset's values again
  setShowing("B");
}

// ------------------------------------------------------------------ A/B, zoom, panning

function setShowing(which) {
  state.showing = which;
  $("ab-which").textContent = which === "A" ? `A: ${$("start").textContent}` : "B: yours";
  $("ab").classList.toggle("on", which === "A");
  $("ab").setAttribute("aria-pressed", String(which === "A"));
  document.body.dataset.showing = which;
  scheduleView(0);
  scheduleFigures(0);
}

function setZoom(z) {
  const vp = $("viewport");
  const cx = (vp.scrollLeft + vp.clientWidth / 2) / state.zoom, cy = (vp.scrollTop + vp.clientHeight / 2) / state.zoom;
  state.zoom = z;
  for (const k of [1, 2, 4]) {
    $(`zoom-${k}`).classList.toggle("on", k === z);
    $(`zoom-${k}`).setAttribute("aria-pressed", String(k === z));
  }
  applyZoom();
  vp.scrollLeft = cx * z - vp.clientWidth / 2;
  vp.scrollTop = cy * z - vp.clientHeight / 2;
  scheduleView(0);
}

function panning() {
  const vp = $("viewport");
  let drag = null;
  vp.addEventListener("pointerdown", (e) => {
    drag = { x: e.clientX, y: e.clientY, left: vp.scrollLeft, top: vp.scrollTop };
    vp.classList.add("dragging"); vp.setPointerCapture(e.pointerId);
  });
  vp.addEventListener("pointermove", (e) => {
    if (!drag) return;
    vp.scrollLeft = drag.left - (e.clientX - drag.x);
    vp.scrollTop = drag.top - (e.clientY - drag.y);
  });
  const end = () => { drag = null; vp.classList.remove("dragging"); };
  vp.addEventListener("pointerup", end);
  vp.addEventListener("pointercancel", end);
  vp.addEventListener("scroll", () => scheduleView(40));
  window.addEventListener("resize", () => scheduleView(60));
}

// ------------------------------------------------------------------ saving

async function save(overwrite) {
  const name = $("save-name").value.trim();
  const msg = $("save-message");
  $("confirm-replace").hidden = true;
  try {
    const r = await call("/api/save", { name, description: $("save-description").value, values: changed(), overwrite });
    const out = await r.json();
    if (r.ok && out.saved) {
      msg.textContent = `saved ${out.path}${out.replaced ? " (replaced)" : ""}`;
      $("save-text").textContent = out.text; $("save-text").hidden = false;
      document.body.dataset.saved = out.path;
    } else {
      msg.textContent = out.error;
      if (out.exists) $("confirm-replace").hidden = false;
    }
  } catch (err) {
    msg.textContent = `the server did not answer: ${err.message}`;
  }
}

// ------------------------------------------------------------------ start

async function main() {
  const r = await fetch("/api/start", { headers: { "X-Token": token }, cache: "no-store" });
  const start = await r.json();
  if (!r.ok) { showMessage(start.error); return; }
  $("image").textContent = start.image;
  $("start").textContent = start.start;
  document.title = `crtfilter tune: ${start.image}`;
  state.groups = start.groups;
  buildControls(start.groups);
  $("controls").addEventListener("submit", (e) => e.preventDefault());
  $("reset").addEventListener("click", reset);
  for (const k of [1, 2, 4]) $(`zoom-${k}`).addEventListener("click", () => setZoom(k));
  $("ab").addEventListener("click", () => setShowing(state.showing === "A" ? "B" : "A"));
  document.addEventListener("keydown", (e) => {
    if (e.key === " " && (e.target === document.body || e.target === $("viewport"))) {
      e.preventDefault(); setShowing(state.showing === "A" ? "B" : "A");
    }
  });
  $("save").addEventListener("click", () => save(false));
  $("confirm-replace").addEventListener("click", () => save(true));
  panning();
  document.body.dataset.ready = "1";
  $("status").textContent = "starting: rendering the first view (on a new machine the fast path compiles first, once)";
  requestView();
  requestFigures();
}

main().catch((err) => showMessage(`the page could not start: ${err.message}`));
