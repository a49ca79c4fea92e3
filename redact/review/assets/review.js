// The review page: frames by index, timeline, range statuses, corrections, apply.
// Everything talks to the local server that served this page; nothing is loaded from elsewhere.
"use strict";
(function () {
  const TOKEN = new URLSearchParams(location.search).get("token") || "";
  const $ = (id) => document.getElementById(id);
  let S = null;            // state from the server
  let cur = 0;             // current frame
  let playing = false;
  let tool = "look";
  let corrections = { moving_boxes: [], regions: [], obscure_frames: [] };
  let openBox = -1;        // index of the moving box being drawn, or -1
  let polyPts = [];        // corners of the area being drawn
  let drag = null;         // {x0, y0, x1, y1} while dragging a box
  const history = [];      // corrections snapshots for undo
  const shown = new Set(); // frames shown on screen, not yet sent
  let ranges = [];         // [{status, note}]
  let saveTimer = null;

  function url(path) { return path + (path.includes("?") ? "&" : "?") + "token=" + encodeURIComponent(TOKEN); }
  async function api(path, body) {
    const opt = body === undefined ? {} : {
      method: "POST", body: JSON.stringify(body),
      headers: { "Content-Type": "application/json", "X-Review-Token": TOKEN } };
    const r = await fetch(url(path), opt);
    const doc = await r.json().catch(() => ({ error: "HTTP " + r.status }));
    if (!r.ok) throw new Error(doc.error || ("HTTP " + r.status));
    return doc;
  }
  function showError(msg) { $("error").textContent = msg || ""; }

  function seconds(i) {
    const [n, d] = (S.time_base || "1/25").split("/").map(Number);
    return ((S.pts[i] - S.pts[0]) * n / d).toFixed(2);
  }

  // ---------------------------------------------------------------- frames
  function frameUrl(which, i) { return url("/frame/" + which + "/" + i); }
  function show(i) {
    cur = Math.max(0, Math.min(S.frames - 1, i));
    const img = $("redacted");
    img.dataset.want = String(cur);
    img.src = frameUrl("redacted", cur);
    if ($("showsource").checked) $("source").src = frameUrl("source", cur);
    $("jump").value = cur;
    $("position").textContent = "frame " + cur + " of " + (S.frames - 1) + " (" + seconds(cur) + " s)";
    $("tl-cursor").style.left = (100 * cur / S.frames) + "%";
    document.querySelectorAll("#rangerows tr").forEach((tr, k) => {
      const r = S.ranges[k]; tr.classList.toggle("current", cur >= r.start && cur <= r.end); });
    draw();
  }
  function onFrameLoaded() {
    const img = $("redacted");
    const i = Number(img.dataset.want);
    const c = $("overlay");
    c.width = img.clientWidth; c.height = img.clientHeight;
    if (!S.watched.has(i)) { S.watched.add(i); shown.add(i); drawWatched(); }
    draw();
    img.dataset.loaded = String(i);
    if (playing) {
      const wait = Math.max(0, 1000 / S.rate - (performance.now() - (img._t || 0)));
      setTimeout(() => { if (playing) { if (cur >= S.frames - 1) setPlaying(false); else { img._t = performance.now(); show(cur + 1); } } }, wait);
    }
  }
  function setPlaying(on) {
    playing = on && cur < S.frames - 1;
    $("play").textContent = playing ? "❚❚ pause" : "▶ play";
    if (playing) { $("redacted")._t = performance.now(); show(cur + 1); }
  }
  async function sendWatched() {
    if (!shown.size) return;
    const runs = []; const list = [...shown].sort((a, b) => a - b); shown.clear();
    for (const i of list) { if (runs.length && runs[runs.length - 1][1] === i - 1) runs[runs.length - 1][1] = i; else runs.push([i, i]); }
    try { const r = await api("/api/watched", { runs }); coverage(r.frames_watched); } catch (e) { showError(e.message); }
  }
  function coverage(n) {
    $("coverage").textContent = "Frames shown: " + n + " of " + S.frames + " — " +
      (n >= S.frames ? "whole video watched" : "not watched in full");
  }

  // ---------------------------------------------------------------- geometry
  function scale() { const img = $("redacted"); return img.clientWidth ? S.width / img.clientWidth : 1; }
  function boxAt(mb, f) {
    const k = mb.keyframes; if (!k.length || f < k[0].frame || f > k[k.length - 1].frame) return null;
    for (let j = 0; j < k.length; j++) {
      if (k[j].frame === f) return k[j].box;
      if (k[j].frame > f) { const a = k[j - 1], b = k[j], w = (f - a.frame) / (b.frame - a.frame);
        return a.box.map((v, q) => v * (1 - w) + b.box[q] * w); }
    }
    return null;
  }
  function inRange(e, f) { const r = e.frames; return !r || (f >= r[0] && f <= r[1]); }
  function draw() {
    const c = $("overlay"); const g = c.getContext("2d"); if (!S) return;
    g.clearRect(0, 0, c.width, c.height); const s = 1 / scale();
    g.lineWidth = 2;
    corrections.moving_boxes.forEach((mb, k) => { const b = boxAt(mb, cur); if (!b) return;
      g.strokeStyle = k === openBox ? "#00e5ff" : "#2456c8"; g.setLineDash(mb.keyframes.some((q) => q.frame === cur) ? [] : [6, 4]);
      g.strokeRect(b[0] * s, b[1] * s, (b[2] - b[0]) * s, (b[3] - b[1]) * s); });
    g.setLineDash([]);
    corrections.regions.forEach((r) => { if (!inRange(r, cur)) return; g.strokeStyle = "#2456c8"; g.beginPath();
      r.points.forEach((p, q) => q ? g.lineTo(p[0] * s, p[1] * s) : g.moveTo(p[0] * s, p[1] * s)); g.closePath(); g.stroke(); });
    if (polyPts.length) { g.strokeStyle = "#00e5ff"; g.beginPath();
      polyPts.forEach((p, q) => q ? g.lineTo(p[0] * s, p[1] * s) : g.moveTo(p[0] * s, p[1] * s)); g.stroke(); }
    if (drag) { g.strokeStyle = "#00e5ff"; g.strokeRect(Math.min(drag.x0, drag.x1), Math.min(drag.y0, drag.y1),
      Math.abs(drag.x1 - drag.x0), Math.abs(drag.y1 - drag.y0)); }
    if (corrections.obscure_frames.some((e) => inRange(e, cur))) { g.fillStyle = "rgba(36,86,200,.35)"; g.fillRect(0, 0, c.width, c.height); }
  }

  // ---------------------------------------------------------------- corrections
  function changed() { renderCorrections(); drawMarks(); draw(); scheduleSave(); }
  function snapshot() { history.push(JSON.stringify({ corrections, openBox })); if (history.length > 500) history.shift(); }
  function undo() {
    if (!history.length) return; const h = JSON.parse(history.pop());
    corrections = h.corrections; openBox = h.openBox; polyPts = []; changed();
  }
  function clampBox(b) {
    const x1 = Math.max(0, Math.min(b[0], b[2])), x2 = Math.min(S.width, Math.max(b[0], b[2]));
    const y1 = Math.max(0, Math.min(b[1], b[3])), y2 = Math.min(S.height, Math.max(b[1], b[3]));
    return [x1, y1, x2, y2].map((v) => Math.round(v * 10) / 10);
  }
  function addKeyframe(box) {
    snapshot();
    if (openBox < 0) { corrections.moving_boxes.push({ label: "drawn during review", keyframes: [] }); openBox = corrections.moving_boxes.length - 1; }
    const k = corrections.moving_boxes[openBox].keyframes.filter((q) => q.frame !== cur);
    k.push({ frame: cur, box }); k.sort((a, b) => a.frame - b.frame);
    corrections.moving_boxes[openBox].keyframes = k; changed();
  }
  function frameSpan(a, b) { return a === b ? "frame " + a : "frames " + a + "–" + b; }
  function renderCorrections() {
    const ol = $("corrections"); ol.textContent = "";
    const add = (text, go) => { const li = document.createElement("li"); li.textContent = text;
      const b = document.createElement("button"); b.textContent = "go to"; b.onclick = () => show(go); li.append(" ", b); ol.append(li); };
    corrections.moving_boxes.forEach((mb, k) => { const f = mb.keyframes;
      add("moving box " + (k + 1) + (k === openBox ? " (being drawn)" : "") + ": " + frameSpan(f[0].frame, f[f.length - 1].frame) +
        ", " + f.length + " keyframe" + (f.length === 1 ? "" : "s") + " (" + f.map((q) => q.frame).join(", ") + ")", f[0].frame); });
    corrections.regions.forEach((r, k) => add("fixed area " + (k + 1) + ": " + (r.frames ? frameSpan(r.frames[0], r.frames[1]) : "every frame") +
      ", " + r.points.length + " corners", r.frames ? r.frames[0] : 0));
    corrections.obscure_frames.forEach((e) => add("whole frames obscured: " + frameSpan(e.frames[0], e.frames[1]), e.frames[0]));
    if (!ol.children.length) { const li = document.createElement("li"); li.textContent = "no corrections yet"; ol.append(li); }
  }
  function obscureFrames(a, b) {
    if (!(Number.isInteger(a) && Number.isInteger(b)) || a < 0 || b >= S.frames || a > b) { showError("frames must be within 0–" + (S.frames - 1)); return; }
    snapshot(); corrections.obscure_frames.push({ label: "obscured during review", frames: [a, b] }); changed();
  }
  function closePoly() {
    if (polyPts.length < 3) { showError("an area needs at least 3 corners"); return; }
    const a = $("polyfrom").value === "" ? 0 : Number($("polyfrom").value);
    const b = $("polyto").value === "" ? S.frames - 1 : Number($("polyto").value);
    snapshot(); corrections.regions.push({ label: "drawn during review", points: polyPts, frames: [a, b] }); polyPts = []; changed();
  }

  // ---------------------------------------------------------------- ranges, saving
  function renderRanges() {
    const tb = $("rangerows"); tb.textContent = "";
    S.ranges.forEach((r, k) => {
      const tr = document.createElement("tr"); tr.className = "range";
      const cell = (x) => { const td = document.createElement("td"); if (x instanceof Node) td.append(x); else td.textContent = x; tr.append(td); return td; };
      cell(String(k + 1)); cell(frameSpan(r.start, r.end) + " (" + seconds(r.start) + "–" + seconds(r.end) + " s)");
      cell(r.why.join(", "));
      const sel = document.createElement("select"); sel.className = "status"; sel.setAttribute("aria-label", "status of range " + (k + 1));
      Object.entries(S.statuses).forEach(([v, words]) => { const o = document.createElement("option"); o.value = v; o.textContent = words; sel.append(o); });
      sel.value = ranges[k].status; sel.onchange = () => { ranges[k].status = sel.value; scheduleSave(); }; cell(sel);
      const ta = document.createElement("textarea"); ta.rows = 2; ta.maxLength = 2000; ta.className = "note";
      ta.placeholder = "what you checked — no names or other personal data"; ta.value = ranges[k].note;
      ta.oninput = () => { ranges[k].note = ta.value; scheduleSave(); }; cell(ta);
      const go = document.createElement("button"); go.textContent = "go to"; go.onclick = () => show(r.start); cell(go);
      tb.append(tr);
    });
    $("failed").textContent = S.failed_frames.length ? "Frames that failed and were written fully obscured: " + S.failed_frames.join(", ") + "." :
      "No frame failed during processing.";
  }
  function scheduleSave() { clearTimeout(saveTimer); $("saved").textContent = "saving…"; saveTimer = setTimeout(save, 250); }
  async function save() {
    try {
      await api("/api/review", { reviewer: $("reviewer").value, ranges, corrections });
      $("saved").textContent = "saved"; showError("");
    } catch (e) { $("saved").textContent = ""; showError(e.message); }
  }

  // ---------------------------------------------------------------- timeline
  function span(cls, a, b) { const d = document.createElement("div"); d.className = cls;
    d.style.left = (100 * a / S.frames) + "%"; d.style.width = Math.max(0.2, 100 * (b - a + 1) / S.frames) + "%"; return d; }
  function drawMarks() {
    const m = $("tl-marks"); m.textContent = "";
    S.ranges.forEach((r) => { const d = span("range", r.start, r.end); d.title = r.why.join(", "); m.append(d); });
    S.failed_frames.forEach((f) => { const d = span("fault", f, f); d.style.width = "2px"; d.title = "failed frame " + f; m.append(d); });
    corrections.moving_boxes.forEach((mb) => { const k = mb.keyframes; if (k.length) m.append(span("fix", k[0].frame, k[k.length - 1].frame)); });
    corrections.regions.forEach((r) => m.append(span("fix", r.frames ? r.frames[0] : 0, r.frames ? r.frames[1] : S.frames - 1)));
    corrections.obscure_frames.forEach((e) => m.append(span("fix", e.frames[0], e.frames[1])));
  }
  function drawWatched() {
    const w = $("tl-watched"); w.textContent = "";
    const list = [...S.watched].sort((a, b) => a - b); let a = null, b = null;
    for (const i of list.concat([Infinity])) { if (a !== null && i === b + 1) { b = i; continue; } if (a !== null) w.append(span("", a, b)); a = b = i; }
  }

  // ---------------------------------------------------------------- apply
  async function apply() {
    await save();
    if (ranges.some((r) => r.status === "not_checked") && !confirm("Some ranges are not yet checked. Apply anyway?")) return;
    try { await api("/api/apply", {}); } catch (e) { showError(e.message); return; }
    $("apply").disabled = true; $("progress").hidden = false; $("applied").textContent = "rendering…";
    const poll = async () => {
      const j = await api("/api/apply");
      if (j.state === "running") { $("progress").value = j.total ? j.done / j.total : 0;
        $("applied").textContent = "rendering frame " + j.done + " of " + j.total + "…"; setTimeout(poll, 300); return; }
      $("apply").disabled = false; $("progress").hidden = true;
      if (j.state === "failed") { $("applied").textContent = ""; showError("apply failed: " + j.error); return; }
      $("applied").textContent = "New copy written: " + j.video + " and signed package " + j.package + " (key " + j.key_id +
        "). Now showing the new copy: watch it through before disclosure.";
      await load();
    };
    setTimeout(poll, 300);
  }

  // ---------------------------------------------------------------- events
  function bind() {
    $("redacted").addEventListener("load", onFrameLoaded);
    $("first").onclick = () => show(0); $("last").onclick = () => show(S.frames - 1);
    $("prev").onclick = () => show(cur - 1); $("next").onclick = () => show(cur + 1);
    $("back10").onclick = () => show(cur - 10); $("fwd10").onclick = () => show(cur + 10);
    $("play").onclick = () => setPlaying(!playing);
    $("jump").onchange = () => show(Number($("jump").value));
    $("showsource").onchange = () => { $("sourcepane").hidden = !$("showsource").checked; if ($("showsource").checked) $("source").src = frameUrl("source", cur); };
    $("reviewer").oninput = scheduleSave;
    document.querySelectorAll("input[name=tool]").forEach((r) => r.onchange = () => setTool(r.value));
    $("endbox").onclick = () => { openBox = -1; renderCorrections(); draw(); };
    $("closepoly").onclick = closePoly;
    $("wholeframe").onclick = () => obscureFrames(cur, cur);
    $("wholerange").onclick = () => obscureFrames(Number($("wholefrom").value), Number($("wholeto").value));
    $("undo").onclick = undo;
    $("apply").onclick = apply;
    $("timeline").onclick = (e) => { const r = $("timeline").getBoundingClientRect(); show(Math.floor(S.frames * (e.clientX - r.left) / r.width)); };
    const c = $("overlay");
    const pos = (e) => { const r = c.getBoundingClientRect(); return [e.clientX - r.left, e.clientY - r.top]; };
    c.addEventListener("mousedown", (e) => { if (tool !== "box") return; const [x, y] = pos(e); drag = { x0: x, y0: y, x1: x, y1: y }; });
    c.addEventListener("mousemove", (e) => { if (!drag) return; [drag.x1, drag.y1] = pos(e); draw(); });
    c.addEventListener("mouseup", () => { if (!drag) return; const s = scale(); const d = drag; drag = null;
      const box = clampBox([d.x0 * s, d.y0 * s, d.x1 * s, d.y1 * s]);
      if (box[2] - box[0] < 2 || box[3] - box[1] < 2) { draw(); return; } addKeyframe(box); });
    c.addEventListener("click", (e) => { if (tool !== "poly") return; const s = scale(); const [x, y] = pos(e);
      polyPts.push([Math.round(x * s * 10) / 10, Math.round(y * s * 10) / 10].map((v, q) => Math.min(q ? S.height : S.width, Math.max(0, v)))); draw(); });
    document.addEventListener("keydown", (e) => {
      if (e.target.tagName === "INPUT" || e.target.tagName === "TEXTAREA" || e.target.tagName === "SELECT") return;
      const step = e.shiftKey ? 10 : 1;
      if (e.key === "ArrowLeft") show(cur - step); else if (e.key === "ArrowRight") show(cur + step);
      else if (e.key === " ") setPlaying(!playing); else if (e.key === "Home") show(0); else if (e.key === "End") show(S.frames - 1);
      else if (e.key === "z" && (e.ctrlKey || e.metaKey)) undo();
      else if (e.key === "b" || e.key === "B") setTool("box"); else if (e.key === "p" || e.key === "P") setTool("poly");
      else if (e.key === "l" || e.key === "L") setTool("look"); else if (e.key === "w" || e.key === "W") obscureFrames(cur, cur);
      else if (e.key === "Escape") { polyPts = []; drag = null; draw(); } else return;
      e.preventDefault();
    });
    setInterval(sendWatched, 1000);
    window.addEventListener("resize", () => { const img = $("redacted"); c.width = img.clientWidth; c.height = img.clientHeight; draw(); });
  }
  function setTool(t) { tool = t; document.querySelectorAll("input[name=tool]").forEach((r) => r.checked = r.value === t); polyPts = []; draw(); }

  async function load() {
    try { S = await api("/api/state"); } catch (e) { showError(e.message); return; }
    const [n, d] = String(S.fps || "25").split("/").map(Number); S.rate = d ? n / d : n;
    S.watched = new Set();
    const rv = S.review; ranges = rv.ranges.map((r) => ({ status: r.status, note: r.note }));
    corrections = Object.assign({ moving_boxes: [], regions: [], obscure_frames: [] }, rv.corrections);
    openBox = -1; $("reviewer").value = rv.reviewer || "";
    $("what").textContent = "Source " + S.source_name + ": " + S.frames + " frames, " + S.width + "×" + S.height +
      ". Copy under review: " + S.folder + (S.reviewed ? " (already reviewed once)" : "") + ".";
    $("copyname").textContent = S.folder; $("polyfrom").max = $("polyto").max = $("wholefrom").max = $("wholeto").max = S.frames - 1;
    renderRanges(); renderCorrections(); drawMarks(); drawWatched(); coverage(rv.frames_watched); show(0);
  }
  bind(); load();
})();
