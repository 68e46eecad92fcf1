// balltraj workbench: the clip page. Plain modern JavaScript, no build step, no network beyond this server.
const bench = document.getElementById("bench");
const clip = bench.dataset.clip;
const W = Number(bench.dataset.width), H = Number(bench.dataset.height), N = Number(bench.dataset.frames);
const $ = (id) => document.getElementById(id);
const canvas = $("view"), ctx = canvas.getContext("2d");
const img = new Image();
const state = {k: 0, step: "calibrate", template: null, templates: {}, clicks: {}, active: null, calib: null,
  start: null, job: null, summary: null, flight: 0, keep: []};

async function api(path, body) {
  const opts = body === undefined ? {} : {method: "POST", headers: {"Content-Type": "application/json"},
    body: JSON.stringify(body)};
  const r = await fetch(path, opts);
  const data = await r.json().catch(() => ({error: `the server answered ${r.status}`}));
  if (!r.ok) throw new Error(data.error || `the server answered ${r.status}`);
  return data;
}
const q = (o) => new URLSearchParams(o).toString();
function say(id, text, bad = false) { const el = $(id); el.textContent = text; el.classList.toggle("bad", bad); }

// ------------------------------------------------------------------ frames
// one frame request at a time: while one loads, only the latest frame asked for waits
let loading = false, pending = null;
function showFrame(k) {
  state.k = Math.max(0, Math.min(N - 1, k));
  $("scrub").value = state.k;
  const fps = Number(bench.dataset.fps);
  $("frameno").textContent = `frame ${state.k} of ${N - 1}` + (fps > 0 ? ` · ${(state.k / fps).toFixed(3)} s` : "");
  if (loading) { pending = state.k; return; }
  loading = true;
  img.src = `/frame?${q({path: clip, k: state.k})}`;
}
function frameDone() {
  loading = false;
  if (pending !== null) { const k = pending; pending = null; showFrame(k); } else draw();
}
img.onload = frameDone;
img.onerror = frameDone;
$("scrub").addEventListener("input", (e) => showFrame(Number(e.target.value)));
$("prev").addEventListener("click", () => showFrame(state.k - 1));
$("next").addEventListener("click", () => showFrame(state.k + 1));
document.addEventListener("keydown", (e) => {
  if (e.target.tagName === "INPUT" || e.target.tagName === "SELECT") return;
  if (e.key === "ArrowLeft") showFrame(state.k - 1);
  if (e.key === "ArrowRight") showFrame(state.k + 1);
});

function mark(u, v, colour, label, size = 7) {
  ctx.strokeStyle = colour; ctx.lineWidth = 2;
  ctx.beginPath(); ctx.moveTo(u - size, v); ctx.lineTo(u + size, v); ctx.moveTo(u, v - size); ctx.lineTo(u, v + size);
  ctx.stroke();
  if (label) { ctx.fillStyle = colour; ctx.font = "13px sans-serif"; ctx.fillText(label, u + 8, v - 8); }
}
function ring(u, v, r, colour, width = 2) {
  ctx.strokeStyle = colour; ctx.lineWidth = width; ctx.beginPath(); ctx.arc(u, v, r, 0, 2 * Math.PI); ctx.stroke();
}
function draw() {
  ctx.drawImage(img, 0, 0, W, H);
  // canvas pixel (x, y) spans image coordinates x-0.5..x+0.5 (OpenCV puts pixel centres at integers)
  const px = (u) => u + 0.5;
  if (state.step === "calibrate") {
    const pred = state.calib?.template_px || {};
    for (const [n, uv] of Object.entries(pred)) if (!(n in state.clicks)) ring(px(uv[0]), px(uv[1]), 5, "#fde047");
    for (const [n, uv] of Object.entries(state.clicks)) {
      mark(px(uv[0]), px(uv[1]), n === state.active ? "#f97316" : "#22d3ee", n);
      if (pred[n]) ring(px(pred[n][0]), px(pred[n][1]), 4, "#fde047", 1);
    }
  }
  if (state.start?.uv) mark(px(state.start.uv[0]), px(state.start.uv[1]), "#a855f7", "start");
  const f = state.summary?.flights?.[state.flight];
  if (f && (state.step === "review" || state.step === "analyse")) {
    f.uv.forEach((uv, i) => {
      const here = f.frame[i] === state.k;
      ring(px(uv[0]), px(uv[1]), here ? 9 : 4, state.keep[i] ? "#4ade80" : "#ef4444", here ? 3 : 2);
    });
  }
}
function imagePoint(e) {
  const r = canvas.getBoundingClientRect();
  return [(e.clientX - r.left) * W / r.width - 0.5, (e.clientY - r.top) * H / r.height - 0.5];
}

// ------------------------------------------------------------------ steps
for (const b of document.querySelectorAll(".tabs button")) b.addEventListener("click", () => setStep(b.dataset.step));
function setStep(step) {
  state.step = step;
  for (const b of document.querySelectorAll(".tabs button")) b.classList.toggle("on", b.dataset.step === step);
  for (const s of document.querySelectorAll(".step")) s.classList.toggle("hidden", s.id !== `step-${step}`);
  const hints = {calibrate: "Click the chosen landmark on the picture.", start: "Click the ball at rest or at release.",
    analyse: "Run the analysis; the tracked points appear on the picture.",
    review: "Click a tracked point to drop or restore it; step through the frames to check them."};
  $("hint").textContent = hints[step];
  draw();
}
// pointer events carry fractional coordinates (sub-pixel on high-density screens); click events may not
canvas.addEventListener("pointerdown", (e) => {
  if (e.button !== 0) return;
  const uv = imagePoint(e);
  if (state.step === "calibrate") clickLandmark(uv);
  else if (state.step === "start") clickStart(uv);
  else if (state.step === "review") togglePoint(uv);
});

// ------------------------------------------------------------------ calibration
function listLandmarks() {
  const ul = $("landmarks"); ul.replaceChildren();
  const t = state.templates[state.template];
  $("frame-words").textContent = t.frame;
  for (const n of Object.keys(t.points)) {
    const li = document.createElement("li");
    const b = document.createElement("button"); b.textContent = n; b.dataset.name = n;
    b.classList.toggle("on", n === state.active); b.classList.toggle("done", n in state.clicks);
    b.addEventListener("click", () => { state.active = n; listLandmarks(); draw(); });
    const err = document.createElement("span"); err.className = "err";
    const e = state.calib?.errors_px?.[n];
    err.textContent = e === undefined ? "" : ` ${e.toFixed(1)} px`;
    li.append(b, err);
    if (n in state.clicks) {
      const x = document.createElement("button"); x.textContent = "✕"; x.title = "forget this click"; x.className = "small";
      x.addEventListener("click", () => { delete state.clicks[n]; recalibrate(); });
      li.append(x);
    }
    ul.append(li);
  }
}
function nextLandmark() {
  const names = Object.keys(state.templates[state.template].points);
  const rest = names.filter((n) => !(n in state.clicks));
  state.active = rest.length ? rest[0] : null;
}
function clickLandmark(uv) {
  if (!state.active) { say("calib-status", "Choose a landmark name first."); return; }
  state.clicks[state.active] = uv.map((x) => Math.round(x * 100) / 100);
  nextLandmark();
  recalibrate();
}
async function recalibrate(save = false) {
  listLandmarks(); draw();
  try {
    const r = await api("/api/calibrate", {path: clip, template: state.template, clicks: state.clicks, save,
      turn: $("turn").checked});
    if (r.need) {
      state.calib = null; $("save-camera").disabled = true;
      say("calib-status", `Click ${r.need} more landmark${r.need > 1 ? "s" : ""}.`);
      $("pose").textContent = "";
    } else {
      state.calib = r; $("save-camera").disabled = false;
      say("calib-status", `Reprojection error ${r.rms_px.toFixed(2)} px (rms over ${Object.keys(state.clicks).length} landmarks)`,
        r.rms_px > 3);
      $("pose").textContent = r.pose + (r.turned ? " — frame turned so play runs along +x" : "");
      if (r.saved) $("camera-saved").textContent = `saved ${r.saved}`;
    }
  } catch (err) { state.calib = null; $("save-camera").disabled = true; say("calib-status", err.message, true); }
  listLandmarks(); draw();
}
$("save-camera").addEventListener("click", () => recalibrate(true));
$("template").addEventListener("change", (e) => {
  state.template = e.target.value; state.clicks = {}; state.calib = null;
  $("turn").checked = state.turnDefault.includes(state.template);
  nextLandmark(); recalibrate();
});
$("turn").addEventListener("change", () => recalibrate());

// ------------------------------------------------------------------ start point
async function clickStart(uv) {
  const h = $("height").value;
  try {
    const r = await api("/api/anchor", {path: clip, uv, ball: $("ball").value, height_m: h === "" ? null : Number(h)});
    state.start = {uv, xyz: r.start_near_m};
    say("start-status", `Start near x ${r.start_near_m[0].toFixed(2)} m, y ${r.start_near_m[1].toFixed(2)} m, ` +
      `height ${r.start_near_m[2].toFixed(2)} m`);
  } catch (err) { say("start-status", err.message, true); }
  draw();
}
$("clear-start").addEventListener("click", () => {
  state.start = null; say("start-status", "No start point: the fit finds the start by itself."); draw();
});

// ------------------------------------------------------------------ analysis and review
const numOrNull = (id) => ($(id).value === "" ? null : Number($(id).value));
$("run").addEventListener("click", async () => {
  $("run").disabled = true; $("progress").classList.remove("hidden"); $("progress").removeAttribute("value");
  say("run-status", "Tracking the ball…");
  try {
    const r = await api("/api/analyze", {path: clip, ball: $("ball").value, start_near_m: state.start?.xyz ?? null,
      target_x_m: numOrNull("target"), temperature_c: numOrNull("temperature"), altitude_m: numOrNull("altitude"),
      athlete: $("athlete").value, session: $("session").value});
    state.job = r.job; poll();
  } catch (err) { say("run-status", err.message, true); $("run").disabled = false; }
});
async function poll() {
  let s;
  try { s = await api(`/api/job/${state.job}?${q({units: $("units").value})}`); } catch (err) { say("run-status", err.message, true); return; }
  if (s.state === "running") {
    if (s.total) { $("progress").max = s.total; $("progress").value = s.done; }
    say("run-status", s.total ? `Tracking: frame ${s.done} of ${s.total}` : `Tracking: frame ${s.done}`);
    setTimeout(poll, 250); return;
  }
  $("run").disabled = false; $("progress").classList.add("hidden");
  if (s.state === "failed") { say("run-status", s.error, true); return; }
  say("run-status", `Done: ${s.flights.length} flight${s.flights.length > 1 ? "s" : ""} tracked.` +
    (s.warnings.length ? ` Note: ${s.warnings.join("; ")}` : ""));
  showResult(s, 0);
}
function showResult(s, flight, jump = true) {
  state.summary = s; state.flight = flight; state.keep = [...s.flights[flight].keep];
  const sel = $("flight"); sel.replaceChildren();
  s.flights.forEach((f, i) => { const o = document.createElement("option"); o.value = i; o.textContent = `flight ${f.flight}`; sel.append(o); });
  sel.value = flight;
  $("refit").disabled = false; $("save-history").disabled = false;
  const f = s.flights[flight];
  const cards = $("headline"); cards.replaceChildren();
  if (!f.cards) say("review-status", "This flight could not be fitted; drop the points that are not the ball and fit again.", true);
  if (f.cards) for (const [k, v, n] of f.cards) {
    const c = document.createElement("div"); c.className = "card";
    for (const [cls, text] of [["k", k], ["v", v], ["n", n]]) {
      const d = document.createElement("div"); d.className = cls; d.textContent = text; c.append(d);
    }
    cards.append(c);
  }
  $("report").src = `/report/${s.id}?${q({units: $("units").value, t: Date.now()})}`;
  $("report").classList.remove("hidden"); $("report-title").classList.remove("hidden");
  if (jump && f.frame.length) showFrame(f.frame[Math.floor(f.frame.length / 2)]);
  draw();
}
$("flight").addEventListener("change", (e) => showResult(state.summary, Number(e.target.value)));
$("units").addEventListener("change", async () => {
  if (!state.job || state.summary?.state !== "done") return;
  showResult(await api(`/api/job/${state.job}?${q({units: $("units").value})}`), state.flight, false);
});
function togglePoint(uv) {
  const f = state.summary?.flights?.[state.flight];
  if (!f) return;
  let best = -1, bestD = 12;
  f.uv.forEach((p, i) => { const d = Math.hypot(p[0] - uv[0], p[1] - uv[1]); if (d < bestD) { bestD = d; best = i; } });
  if (best < 0) return;
  state.keep[best] = !state.keep[best];
  const dropped = state.keep.filter((k) => !k).length;
  say("review-status", `${dropped} point${dropped === 1 ? "" : "s"} dropped; fit again to use the change.`);
  draw();
}
$("refit").addEventListener("click", async () => {
  say("review-status", "Fitting…");
  try {
    const s = await api("/api/refit", {job: state.job, flight: state.flight, keep: state.keep,
      units: $("units").value});
    say("review-status", `Fitted again with ${state.keep.filter(Boolean).length} points.`);
    showResult(s, state.flight, false);
  } catch (err) { say("review-status", err.message, true); }
});
$("save-history").addEventListener("click", async () => {
  try {
    const r = await api("/api/save", {job: state.job});
    say("review-status", r.stored ? `Saved to the history (${r.library}).` : "Already in the history.");
  } catch (err) { say("review-status", err.message, true); }
});

$("report").addEventListener("load", () => { $("report").dataset.loaded = $("report").src; });

// ------------------------------------------------------------------ start
(async function init() {
  try {
    const info = await api(`/api/clip?${q({path: clip})}`);
    state.templates = info.templates;
    for (const t of Object.keys(info.templates)) {
      const o = document.createElement("option"); o.value = t; o.textContent = t; $("template").append(o);
    }
    for (const b of info.balls) { const o = document.createElement("option"); o.value = b; o.textContent = b; $("ball").append(o); }
    state.template = info.clicked?.template ?? Object.keys(info.templates)[0];
    state.turnDefault = info.turn_default;
    $("template").value = state.template;
    $("turn").checked = info.clicked ? info.clicked.turned : state.turnDefault.includes(state.template);
    if (info.clicked) state.clicks = info.clicked.clicks;
    nextLandmark(); listLandmarks();
    if (info.clicked) recalibrate();
    bench.dataset.ready = "1";
  } catch (err) { say("calib-status", err.message, true); }
  showFrame(0);
})();
