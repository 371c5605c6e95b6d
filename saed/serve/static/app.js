// saed serve: the page. Plain JS, no library, nothing fetched from elsewhere.
// It follows GET /api/results (long-poll), shows one result at a time on a canvas (zoom, pan, hover),
// and sends chosen or dropped files to POST /api/index (docs/contract.md).
"use strict";

const $ = (id) => document.getElementById(id);
const state = { version: -1, rows: [], current: null, data: null, sol: 0, img: null,
                view: { s: 1, tx: 0, ty: 0 }, followId: null, tablesReady: false, uploading: 0, units: "nm" };
const MAX_LABELS = 36;

// ------------------------------------------------------------------ text helpers
function esc(t) { return String(t == null ? "" : t).replace(/[&<>"']/g, (c) => ({ "&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;", "'": "&#39;" }[c])); }
// indices with overbars (combining overline) for negative values, as written on paper
function barIdx(v) { if (!v) return ""; return v.map((x) => x < 0 ? `<span class="bar">${-x}</span>` : String(x)).join(Math.max(...v.map(Math.abs)) >= 10 ? " " : ""); }
function fmt(v, nd) { return v == null || !isFinite(v) ? "\u2013" : Number(v).toFixed(nd); }
// lengths as the settings' units say (saed.crystal.notation.UNITS): nm, or angstrom = 10 per nm, with the
// same significant figures; the data themselves stay in nm and 1/nm
const UNITS = { nm: { perNm: 1, sym: "nm", shift: 0 }, angstrom: { perNm: 10, sym: "\u00c5", shift: 1 } };
function unit() { return UNITS[state.units] || UNITS.nm; }
function lenText(dNm, ndNm) { const u = unit(); return `${fmt(dNm == null ? null : dNm * u.perNm, Math.max(0, ndNm - u.shift))} ${u.sym}`; }
function recipText(vInvNm, ndInvNm) { const u = unit(); return `${fmt(vInvNm == null ? null : vInvNm / u.perNm, ndInvNm + u.shift)} 1/${u.sym}`; }

async function api(path, opts) {
  const r = await fetch(path, Object.assign({ credentials: "same-origin", cache: "no-store" }, opts || {}));
  let body = null;
  try { body = await r.json(); } catch (e) { body = { error: `HTTP ${r.status}` }; }
  return { ok: r.ok, status: r.status, body, headers: r.headers };
}

// ------------------------------------------------------------------ status and tables
async function pollStatus() {
  const r = await api("/api/status");
  if (r.ok) showStatus(r.body);
  setTimeout(pollStatus, state.tablesReady ? 1000 : 250);
}

function showStatus(st) {
  const t = st.tables, el = $("tables");
  if (t.state === "building") {
    const pct = t.total ? Math.round(100 * t.done / t.total) : 0;
    el.className = "tables";
    el.innerHTML = `building tables (once) <span class="bar"><i style="width:${pct}%"></i></span> ${t.done}/${t.total} ${esc(t.phase)}`;
    state.tablesReady = false;
  } else if (t.state === "ready") {
    el.className = "tables ready";
    el.textContent = `tables ready: ${t.total} phase${t.total === 1 ? "" : "s"}` + (t.seconds != null ? ` (built in ${t.seconds} s)` : "");
    state.tablesReady = true;
  } else if (t.state === "error") {
    el.className = "tables failed"; el.textContent = "tables failed: " + t.message; state.tablesReady = true;
  } else { el.className = "tables"; el.textContent = "tables: waiting"; }
  $("watch").textContent = st.watch ? "watching " + st.watch + (st.watch_error ? " \u2014 " + st.watch_error : "") : "no watched folder (saed serve --watch DIR)";
  if (!state.settingsShown) { fillSettings(st); state.settingsShown = true; }
  const units = st.settings.units || "nm";
  if (units !== state.units) { state.units = units; if (state.data) { showNotes(); showCalib(state.data); draw(); } }
}

function fillSettings(st) {
  const s = st.settings;
  $("phases").value = s.phases.join(", ");
  $("scale").value = s.scale_inv_nm_per_px == null ? "" : s.scale_inv_nm_per_px;
  $("camera_length").value = s.camera_length_mm == null ? "" : s.camera_length_mm;
  $("pixel_pitch").value = s.pixel_pitch_um == null ? "" : s.pixel_pitch_um;
  $("voltage").value = s.effective_voltage_kv;
  $("alpha_axis").value = s.alpha_axis_deg == null ? "" : s.alpha_axis_deg;
  $("units").value = s.units || "nm";
  $("phaselist").innerHTML = st.phases_available.map((n) => `<option value="${esc(n)}">`).join("");
  $("settingsmsg").textContent = "calibration: " + s.calibration_text + (s.calibration_file ? " (" + s.calibration_file + ")" : "");
}

$("settings").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const fd = new FormData();
  $("phases").value.split(/[,\s]+/).filter(Boolean).forEach((p) => fd.append("phase", p));
  for (const k of ["scale", "camera_length", "pixel_pitch", "voltage", "alpha_axis", "units"]) fd.append(k, $(k).value.trim());
  const r = await api("/api/settings", { method: "POST", body: fd });
  if (!r.ok) { $("settingsmsg").innerHTML = `<span class="st-error">${esc(r.body.error)}</span>`; return; }
  state.tablesReady = false; fillSettings(r.body); showStatus(r.body);
  $("settingsmsg").textContent = "applied and remembered; " + $("settingsmsg").textContent;
});

// ------------------------------------------------------------------ results list (long-poll)
async function followResults() {
  for (;;) {
    try {
      const r = await api(`/api/results?all=1&after=${state.version}&wait=15`);
      if (r.ok) {
        state.version = Number(r.headers.get("x-saed-version"));
        showRows(r.body);
      } else { await sleep(1000); }
    } catch (e) { await sleep(1000); }
  }
}
function sleep(ms) { return new Promise((res) => setTimeout(res, ms)); }

function answerOf(row) {
  if (row.status === "ok") return `${esc(row.phase)} [${barIdx(row.zone_axis_4 || row.zone_axis)}]`;
  if (row.status === "no-solution") return "no solution";
  if (row.status === "error") return "";
  return row.status === "waiting" ? "waiting for the file" : "indexing\u2026";
}

function showRows(rows) {
  const prev = new Map(state.rows.map((r) => [r.id, r]));
  state.rows = rows;
  const body = $("history").tBodies[0];
  body.innerHTML = rows.map((r) => {
    const t = r.done_s ? new Date(r.done_s * 1000).toLocaleTimeString() : "";
    const ans = r.status === "error" ? `<td class="err">${esc(r.error)}</td>` : `<td class="l">${answerOf(r)}${r.status === "waiting" && r.error ? ` <span class="sub">${esc(r.error)}</span>` : ""}</td>`;
    const g = r.grain ? `${esc(r.grain.grain)} (\u03b1 ${fmt(r.grain.alpha_deg, 1)}, \u03b2 ${fmt(r.grain.beta_deg, 1)})` : "";
    return `<tr data-id="${esc(r.id)}" class="row-${esc(r.status)}${state.current === r.id ? " on" : ""}"><td class="l">${esc(r.image)}${r.origin === "upload" ? ' <span class="sub">(opened)</span>' : ""}</td>` +
      `<td class="l st-${esc(r.status)}">${esc(r.status)}</td>${ans}<td>${t}</td><td class="l">${g}</td></tr>`;
  }).join("");
  showGrains(rows);
  // follow: show the newest finished pattern as soon as it is done
  const newest = rows.find((r) => r.status !== "indexing" && r.status !== "waiting");
  const cur = rows.find((r) => r.id === state.current);
  if (state.followId) {
    const f = rows.find((r) => r.id === state.followId);
    if (f && f.status !== "indexing" && f.status !== "waiting") { state.followId = null; show(f.id); return; }
  }
  if ($("follow").checked && newest && newest.id !== state.current && state.pending !== newest.id && (!prev.has(newest.id) || prev.get(newest.id).status !== newest.status)) {
    if (!cur || newest.done_s >= (cur.done_s || 0)) { show(newest.id); return; }
  }
  if (cur && state.data && state.data.id === cur.id && state.data.status !== cur.status) show(cur.id);
  else if (cur) showMeta(cur);
}

// ------------------------------------------------------------------ grains: joint indexing (saed grain)
function showGrains(rows) {
  const by = new Map();
  for (const r of rows.slice().reverse()) if (r.grain) { if (!by.has(r.grain.grain)) by.set(r.grain.grain, []); by.get(r.grain.grain).push(r); }
  const body = $("grains").tBodies[0];
  const html = !by.size ? '<tr><td class="l sub" colspan="3">none marked yet: open a pattern and mark it under "One grain"</td></tr>' : [...by.entries()].map(([name, rs]) => {
    const pats = rs.map((r) => `${esc(r.image)} (${fmt(r.grain.alpha_deg, 1)}, ${fmt(r.grain.beta_deg, 1)})`).join("; ");
    const why = rs.length < 2 ? "mark a second pattern of this grain first" : "index the marked patterns together to one phase and orientation";
    return `<tr><td class="l">${esc(name)}</td><td class="l">${pats}</td><td><button type="button" class="jointbtn" data-grain="${esc(name)}" title="${why}"${rs.length < 2 ? " disabled" : ""}>index this grain jointly</button></td></tr>`;
  }).join("");
  if (body.innerHTML !== html) body.innerHTML = html;
}

$("grains").addEventListener("click", async (ev) => {
  const b = ev.target.closest("button[data-grain]");
  if (!b || b.disabled) return;
  const name = b.dataset.grain;
  $("grainanswer").hidden = false; $("grainanswer").className = "answer small";
  $("grainanswer").textContent = `indexing grain ${name} jointly…`; $("grainresult").hidden = true;
  const r = await api(`/api/grain-index/${encodeURIComponent(name)}`, { method: "POST" });
  if (!r.ok) {
    $("grainanswer").className = "answer small st-error";
    $("grainanswer").textContent = `grain ${name}: ${r.body.error || "HTTP " + r.status}`; return;
  }
  const d = r.body, best = (d.solutions || []).find((s) => s.joint);
  // what the series could not decide stays in the headline: never a bare answer when a look-alike remains
  const open = best ? (d.lookalikes || []).filter((lk) => lk.relation === "undecided") : [];
  const others = open.filter((lk) => lk.phase !== best.phase).map((lk) => lk.phase);
  const doubt = (others.length ? `; ${others.join(", ")} not ruled out` : "")
    + (open.some((lk) => lk.phase === best.phase) ? "; 180\u00b0 sense not settled" : "");
  $("grainanswer").className = "answer small " + (best && !open.length ? "st-ok" : "st-no-solution");
  $("grainanswer").textContent = best
    ? `grain ${name}: ${best.phase}, Euler (Bunge) ${best.euler_bunge_deg.map((v) => fmt(v, 1)).join(", ")}\u00b0${doubt}` + (open.length ? " (see below)" : "")
    : `grain ${name}: no joint solution \u2013 ${d.message}`;
  $("grainresult").textContent = d.summary_display || d.summary; $("grainresult").hidden = false;
});

$("history").addEventListener("click", (ev) => {
  const tr = ev.target.closest("tr[data-id]");
  if (tr) show(tr.dataset.id);
});

// ------------------------------------------------------------------ one result
async function show(id) {
  state.pending = id;
  const r = await api(`/api/result/${encodeURIComponent(id)}`);
  if (state.pending === id) state.pending = null;
  if (!r.ok) return;
  const d = r.body;
  state.current = id; state.data = d; state.sol = 0;
  for (const tr of $("history").tBodies[0].rows) tr.classList.toggle("on", tr.dataset.id === id);
  $("empty").hidden = d.status === "ok" || d.status === "no-solution";
  showResult(d);
  if (d.view) {
    const r2 = await fetch(`/api/image/${encodeURIComponent(id)}?v=${d.done_s}`, { credentials: "same-origin", cache: "no-store" });
    if (!r2.ok || state.current !== id) return;
    const grey = new Uint8Array(await r2.arrayBuffer());
    const [rows, cols] = d.view.display_shape;
    const off = document.createElement("canvas");
    off.width = cols; off.height = rows;
    const octx = off.getContext("2d"), im = octx.createImageData(cols, rows), px = im.data;
    for (let i = 0, j = 0; i < grey.length; i++, j += 4) { const g = grey[i]; px[j] = g; px[j + 1] = g; px[j + 2] = g; px[j + 3] = 255; }
    octx.putImageData(im, 0, 0);
    if (state.current !== id) return;
    state.img = off; fitView(); draw();
    window.saedShown = { id: id, image: d.image, t_ms: Date.now() };  // for saed bench: when the result was drawn
  } else { state.img = null; draw(); $("empty").textContent = d.status === "error" ? "This pattern could not be indexed (see the message on the right)." : "Waiting for this pattern\u2026"; }
}

function showMeta(row) { /* grain and saved links can change without a new result */
  if (!state.data || state.data.id !== row.id) return;
  state.data.grain = row.grain; state.data.saved = row.saved; showSaved(state.data); showGrain(state.data);
}

function showResult(d) {
  const doc = d.doc, sols = doc ? doc.solutions : [];
  const best = sols[0];
  const v = d.view;
  $("error").hidden = d.status !== "error";
  $("error").textContent = d.status === "error" ? (d.error.startsWith(d.image) ? d.error : `${d.image}: ${d.error}`) : "";
  $("answer").dataset.zone = best ? v.solutions[0].zone_plain : "";
  $("answer").dataset.phase = best ? best.phase : "";
  if (best) {
    const word = v.solutions[0].confidence;
    $("answer").innerHTML = `${esc(best.phase)} ${v.solutions[0].zone_html}${v.crystals_more_html || ""}<span class="tag ${esc(word)}" title="${esc(v.confidence_meaning[word] || "")}">${esc(word)}</span>`;
  } else if (d.status === "error") {
    $("answer").innerHTML = `${esc(d.image)} <span class="tag bad none">error</span>`;
  } else if (doc) {
    $("answer").innerHTML = `No solution <span class="tag none">none</span>`;
  } else { $("answer").textContent = `${d.image}: ${d.status}`; }
  const sub = [];
  if (doc) {
    sub.push(`${esc(d.image)} \u2014 ${doc.image_shape[1]}\u00d7${doc.image_shape[0]} px, ${doc.spots.length} spots`);
    if (d.elapsed_s != null) sub.push(`indexed in ${fmt(d.elapsed_s, 2)} s`);
    if (!doc.calibrated) sub.push('<span class="st-no-solution">uncalibrated: phases of the same structure differ only in the implied scale</span>');
    if (doc.message) sub.push(`<span class="st-no-solution">${v.message_html}</span>`);
  }
  $("sub").innerHTML = sub.join("; ");
  const tb = $("solutions").tBodies[0];
  $("scorehead").title = v ? v.score_meaning : "";
  tb.innerHTML = sols.map((s, i) => `<tr data-k="${i}" class="sol${i === state.sol ? " on" : ""}"><td>${i + 1}</td><td class="l">${esc(s.phase)}</td><td class="l">${v.solutions[i].zone_html}</td>` +
    `<td>${fmt(s.score, 2)}</td><td>${s.n_explained}/${s.indexed_spots.length + s.unexplained_spots.length}</td><td>${fmt(s.mean_d_error_pct, 2)}</td><td>${fmt(s.mean_angle_error_deg, 2)}\u00b0</td></tr>`).join("")
    || (doc && doc.near_miss ? `<tr><td colspan="7" class="l sub">closest (below the threshold): ${esc(doc.near_miss.phase)} ${v.near_miss.zone_html}, score ${fmt(doc.near_miss.score, 2)}</td></tr>` : "");
  showNotes();
  showCalib(d);
  showSaved(d); showGrain(d);
  $("save").disabled = !doc;
  $("mark").disabled = !doc;
}

function curSolView() {
  const v = state.data && state.data.view;
  if (!v) return null;
  if (v.solutions.length) return v.solutions[Math.min(state.sol, v.solutions.length - 1)];
  return v.near_miss;
}

function showNotes() {
  const d = state.data, sv = curSolView();
  const items = [];
  // notes come as HTML made by saed.crystal.notation.person_text: escaped, negative indices overbarred
  if (sv) for (const n of (sv.notes_html_by_units && sv.notes_html_by_units[state.units]) || sv.notes_html) items.push(`<li>${n}</li>`);
  // several crystals: which spots belong to which, and their relationship (HTML from saed.report);
  // after the look-alike notes, which its own note refers to as 'listed above'
  if (d && d.view && d.view.crystals_html) items.push(`<li>${d.view.crystals_html}</li>`);
  if (d && d.view) for (const n of d.view.notes_html) items.push(`<li class="sub">${n}</li>`);
  $("notes").innerHTML = items.join("") || '<li class="sub">none</li>';
  const doc = d && d.doc;
  const s = doc && doc.solutions[state.sol];
  if (doc && !doc.solutions.length && doc.near_miss) $("viewing").innerHTML = `drawing the closest fit, REJECTED (score ${fmt(doc.near_miss.score, 2)}): ${esc(doc.near_miss.phase)} ${d.view.near_miss.zone_html}`;
  else $("viewing").innerHTML = s && state.sol > 0 ? `drawing solution ${state.sol + 1}: ${esc(s.phase)} ${d.view.solutions[state.sol].zone_html}`
    // several crystals: this solution alone leaves the other crystals' spots 'not explained'; say so
    + (d.view.crystals_view ? ' <span class="sub">(alone; solution 1 draws every crystal)</span>' : "") : "";
}

function showCalib(d) {
  const doc = d.doc;
  if (!doc) { $("calib").textContent = ""; return; }
  const best = doc.solutions[0] || doc.near_miss;
  let t = doc.calibrated ? `${recipText(doc.scale_inv_nm_per_px, 5)} per px at ${doc.voltage_kv} kV` : `uncalibrated, ${doc.voltage_kv} kV`;
  if (!doc.calibrated && best) t += `; implied scale ${recipText(best.scale_inv_nm_per_px, 5)} per px` + (best.implied_camera_length_mm ? `, camera length ${fmt(best.implied_camera_length_mm, 0)} mm` : "");
  if (doc.calibrated && best && best.scale_error_pct != null) {
    const e = Math.abs(best.scale_error_pct) < 0.05 ? 0 : best.scale_error_pct;
    t += `; the best solution's refined scale is ${e > 0 ? "+" : ""}${fmt(e, 1)} % from it`;
  }
  $("calib").innerHTML = `${esc(t)}<div class="src">from: ${esc(doc.calibration_source || "")}</div>`;
}

function showSaved(d) {
  $("saved").innerHTML = (d.saved || []).map((l) => `<a href="${esc(l)}" target="_blank" rel="noopener">${esc(l.split("/").pop())}</a>`).join("");
}
function showGrain(d) {
  const g = d.grain;
  $("grainnote").textContent = g ? `marked as grain ${g.grain} (\u03b1 ${fmt(g.alpha_deg, 1)}\u00b0, \u03b2 ${fmt(g.beta_deg, 1)}\u00b0); stored for joint indexing of the grain's patterns` : "";
}

$("solutions").addEventListener("click", (ev) => {
  const tr = ev.target.closest("tr[data-k]");
  if (!tr || !state.data) return;
  state.sol = Number(tr.dataset.k);
  for (const r of $("solutions").tBodies[0].rows) r.classList.toggle("on", r === tr);
  showNotes(); draw();
});

$("save").addEventListener("click", async () => {
  if (!state.current) return;
  $("save").disabled = true; $("saved").textContent = "saving\u2026";
  const r = await api(`/api/save/${encodeURIComponent(state.current)}`, { method: "POST" });
  $("save").disabled = false;
  if (!r.ok) { $("saved").innerHTML = `<span class="st-error">${esc(r.body.error)}</span>`; return; }
  $("saved").innerHTML = "saved: " + r.body.links.map((l, i) => `<a href="${esc(l)}" target="_blank" rel="noopener" title="${esc(r.body.saved[i])}">${esc(r.body.saved[i])}</a>`).join("");
});

$("grainform").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  if (!state.current) return;
  const fd = new FormData();
  for (const k of ["grain", "alpha", "beta"]) fd.append(k, $(k).value.trim());
  const r = await api(`/api/grain/${encodeURIComponent(state.current)}`, { method: "POST", body: fd });
  if (!r.ok) { $("grainnote").innerHTML = `<span class="st-error">${esc(r.body.error)}</span>`; return; }
  state.data.grain = r.body.grain; showGrain(state.data);
});

// ------------------------------------------------------------------ opening and dropping files
async function upload(file) {
  if (!file) return;
  const fd = new FormData();
  fd.append("file", file, file.name);
  $("answer").textContent = `indexing ${file.name}\u2026`; $("error").hidden = true;
  state.uploading++;
  const r = await api("/api/index", { method: "POST", body: fd });
  state.uploading--;
  if (r.body && r.body.id) { show(r.body.id); return; }
  $("answer").textContent = file.name;
  $("error").hidden = false; $("error").textContent = r.body.error || `HTTP ${r.status}`;
}
$("file").addEventListener("change", (ev) => { upload(ev.target.files[0]); ev.target.value = ""; });
let dragDepth = 0;
window.addEventListener("dragenter", (ev) => { ev.preventDefault(); dragDepth++; $("dropveil").hidden = false; });
window.addEventListener("dragleave", () => { if (--dragDepth <= 0) { dragDepth = 0; $("dropveil").hidden = true; } });
window.addEventListener("dragover", (ev) => ev.preventDefault());
window.addEventListener("drop", (ev) => { ev.preventDefault(); dragDepth = 0; $("dropveil").hidden = true; if (ev.dataTransfer.files.length) upload(ev.dataTransfer.files[0]); });

// ------------------------------------------------------------------ the canvas: pattern, spots, labels
const cv = $("canvas"), ctx = cv.getContext("2d");
function sizeCanvas() {
  const r = cv.getBoundingClientRect(), dpr = window.devicePixelRatio || 1;
  cv.width = Math.max(1, Math.round(r.width * dpr)); cv.height = Math.max(1, Math.round(r.height * dpr));
}
function fitView() {
  sizeCanvas();
  const v = state.data && state.data.view;
  if (!v) return;
  const [rows, cols] = v.image_shape;
  // frame the spots (plus a margin) when they fill only the middle of a large detector
  const sv = curSolView(), pts = (sv ? sv.spots : v.spots);
  const [cx, cy] = v.center_px;
  let r = 60; for (const p of pts) r = Math.max(r, Math.hypot(p.x - cx, p.y - cy));
  let x0 = Math.max(cx - 1.18 * r, -0.5), x1 = Math.min(cx + 1.18 * r, cols - 0.5), y0 = Math.max(cy - 1.18 * r, -0.5), y1 = Math.min(cy + 1.18 * r, rows - 0.5);
  if (x1 - x0 > 0.8 * cols && y1 - y0 > 0.8 * rows) { x0 = -0.5; x1 = cols - 0.5; y0 = -0.5; y1 = rows - 0.5; }
  const s = Math.min(cv.width / (x1 - x0), cv.height / (y1 - y0));
  state.view = { s, tx: cv.width / 2 - s * (x0 + x1) / 2, ty: cv.height / 2 - s * (y0 + y1) / 2 };
}
function toScreen(x, y) { const v = state.view; return [v.tx + v.s * x, v.ty + v.s * y]; }
function toWorld(sx, sy) { const v = state.view; return [(sx - v.tx) / v.s, (sy - v.ty) / v.s]; }

function draw() {
  const dpr = window.devicePixelRatio || 1;
  ctx.setTransform(1, 0, 0, 1, 0, 0);
  ctx.fillStyle = "#000"; ctx.fillRect(0, 0, cv.width, cv.height);
  const d = state.data, v = d && d.view;
  cv.dataset.solution = v ? String(state.sol + 1) : "";
  if (!v || !state.img) { drawLegend(null); return; }
  const f = v.display_factor, vw = state.view;
  ctx.imageSmoothingEnabled = vw.s * f < 2;
  // image pixel k of the reduced picture covers pattern pixels [k f - 0.5, (k+1) f - 0.5)
  const [ix, iy] = toScreen(-0.5, -0.5);
  ctx.drawImage(state.img, ix, iy, state.img.width * f * vw.s, state.img.height * f * vw.s);
  const sv = curSolView();
  const style = v.kind_style;
  const unit = Math.max(7 * dpr, Math.min(16 * dpr, 0.012 * Math.min(cv.width, cv.height)));
  if (sv && $("showsim").checked) {
    ctx.strokeStyle = v.predicted_colour; ctx.globalAlpha = 0.8; ctx.lineWidth = 1.2 * dpr;
    const [rows, cols] = v.image_shape;
    for (const [x, y, inten, dd] of sv.predicted) {
      if (x < 0 || y < 0 || x > cols - 1 || y > rows - 1) continue;
      const [sx, sy] = toScreen(x, y);
      if (sx < -20 || sy < -20 || sx > cv.width + 20 || sy > cv.height + 20) continue;
      if (dd) { const q = 0.35 * unit; ctx.beginPath(); ctx.moveTo(sx, sy - q); ctx.lineTo(sx + q, sy); ctx.lineTo(sx, sy + q); ctx.lineTo(sx - q, sy); ctx.closePath(); ctx.stroke(); continue; }
      const side = unit * (0.5 + 1.4 * Math.sqrt(Math.max(inten, 0)));
      ctx.strokeRect(sx - side / 2, sy - side / 2, side, side);
    }
    ctx.globalAlpha = 1;
  }
  // several crystals, solution 1 shown: crystals 2 and 3 in their own colours, as the overlay draws them
  const cw = furtherCrystals(v, sv);
  const elsewhere = new Map();
  if (cw) {
    for (const c of cw.further) for (const s of c.spots) {
      if (!elsewhere.has(s.index)) elsewhere.set(s.index, []);
      elsewhere.get(s.index).push({ colour: c.colour, shared: s.shared, hkl: s.hkl });
    }
    for (const i of cw.cross_double_diffraction) if (!elsewhere.has(i)) elsewhere.set(i, []);
    if ($("showsim").checked) {
      const [rows, cols] = v.image_shape;
      ctx.globalAlpha = 0.8; ctx.lineWidth = 1.2 * dpr;
      for (const c of cw.further) {
        ctx.strokeStyle = c.colour;
        for (const [x, y, inten] of c.predicted) {
          if (x < 0 || y < 0 || x > cols - 1 || y > rows - 1) continue;
          const [sx, sy] = toScreen(x, y), side = unit * (0.5 + 1.4 * Math.sqrt(Math.max(inten, 0)));
          ctx.strokeRect(sx - side / 2, sy - side / 2, side, side);
        }
      }
      ctx.globalAlpha = 1;
    }
  }
  const spots = sv ? sv.spots : v.spots;
  const rc = 0.8 * unit;
  spots.forEach((p, i) => {
    const other = elsewhere.get(i) || [];
    for (const o of other) {
      const [sx, sy] = toScreen(p.x, p.y);
      ctx.strokeStyle = o.colour; ctx.lineWidth = 2 * dpr;
      ctx.setLineDash(o.shared ? [5 * dpr, 3 * dpr] : []);
      ctx.beginPath(); ctx.arc(sx, sy, (o.shared ? 1.45 : 1) * rc, 0, 2 * Math.PI); ctx.stroke();
      ctx.setLineDash([]);
    }
    if (cw && cw.cross_double_diffraction.includes(i)) {
      const [sx, sy] = toScreen(p.x, p.y), q = 0.7 * rc;
      ctx.strokeStyle = cw.cross_dd_colour; ctx.lineWidth = 1.8 * dpr;
      ctx.beginPath(); ctx.moveTo(sx - q, sy); ctx.lineTo(sx + q, sy); ctx.moveTo(sx, sy - q); ctx.lineTo(sx, sy + q); ctx.stroke();
    }
  });
  for (const [i, p] of spots.entries()) {
    // a spot another crystal explains is no "not explained" spot of crystal 1: no red cross for it
    if (elsewhere.has(i) && (p.kind === "forbidden" || p.kind === "unindexed")) continue;
    const st = style[p.kind] || style.unindexed;
    const [sx, sy] = toScreen(p.x, p.y);
    ctx.strokeStyle = st.colour; ctx.lineWidth = 2 * dpr;
    ctx.setLineDash(st.dash === "--" ? [5 * dpr, 3 * dpr] : st.dash === ":" ? [2 * dpr, 2.5 * dpr] : []);
    ctx.beginPath(); ctx.arc(sx, sy, rc, 0, 2 * Math.PI); ctx.stroke();
    ctx.setLineDash([]);
    if (p.kind === "forbidden" || p.kind === "unindexed") {
      const q = 0.55 * rc; ctx.lineWidth = 1.4 * dpr;
      ctx.beginPath(); ctx.moveTo(sx - q, sy - q); ctx.lineTo(sx + q, sy + q); ctx.moveTo(sx - q, sy + q); ctx.lineTo(sx + q, sy - q); ctx.stroke();
    }
  }
  const [cx, cy] = v.center_px, [scx, scy] = toScreen(cx, cy);
  ctx.strokeStyle = "#ff375f"; ctx.lineWidth = 2 * dpr; const arm = 1.3 * unit;
  ctx.beginPath(); ctx.moveTo(scx - arm, scy); ctx.lineTo(scx + arm, scy); ctx.moveTo(scx, scy - arm); ctx.lineTo(scx, scy + arm); ctx.stroke();
  if (sv && sv.laue_center_px) {
    const [lx, ly] = toScreen(sv.laue_center_px[0], sv.laue_center_px[1]);
    ctx.strokeStyle = "#ff9f0a"; ctx.lineWidth = 2.5 * dpr; const q = 0.6 * unit;
    ctx.beginPath(); ctx.moveTo(lx - q, ly - q); ctx.lineTo(lx + q, ly + q); ctx.moveTo(lx - q, ly + q); ctx.lineTo(lx + q, ly - q); ctx.stroke();
    ctx.fillStyle = "#ff9f0a"; ctx.font = `${12 * dpr}px system-ui, sans-serif`; ctx.fillText("Laue-circle centre", lx + q + 4 * dpr, ly - q);
  }
  if ($("showlabels").checked && sv) {
    const lab = spots.filter((p) => p.hkl).map((p) => [Math.hypot(p.x - cx, p.y - cy), p]).sort((a, b) => a[0] - b[0]).slice(0, MAX_LABELS);
    ctx.font = `600 ${13 * dpr}px system-ui, sans-serif`; ctx.textBaseline = "middle";
    for (const [r, p] of lab) {
      const [sx, sy] = toScreen(p.x, p.y);
      const ux = r > 0 ? (p.x - cx) / r : 0, uy = r > 0 ? (p.y - cy) / r : -1;
      const tx = sx + ux * (rc + 13 * dpr), ty = sy + uy * (rc + 11 * dpr);
      if (p.projected) drawIdx(p.projected[1], tx, ty, dpr, `1/${p.projected[0]}(`, ")");
      else drawIdx(p.hkl, tx, ty, dpr);
    }
    // further crystals' own spots: their labels in their colour, on the inward side
    if (cw) {
      const own = spots.map((p, i) => [p, (elsewhere.get(i) || []).find((o) => !o.shared && o.hkl)]).filter(([p, o]) => o && !p.hkl)
        .map(([p, o]) => [Math.hypot(p.x - cx, p.y - cy), p, o]).sort((a, b) => a[0] - b[0]).slice(0, MAX_LABELS);
      for (const [r, p, o] of own) {
        const [sx, sy] = toScreen(p.x, p.y);
        const ux = r > 0 ? (p.x - cx) / r : 0, uy = r > 0 ? (p.y - cy) / r : -1;
        drawIdx(o.hkl, sx - ux * (rc + 13 * dpr), sy - uy * (rc + 11 * dpr), dpr, "", "", o.colour);
      }
    }
    ctx.textBaseline = "alphabetic";
  }
  drawScaleBar(v, sv, dpr);
  drawLegend(v, sv);
}

// one index label centred at (x, y): digits side by side, a bar drawn over each negative index
function drawIdx(idx, x, y, dpr, prefix = "", suffix = "", colour = "#fff") {
  const parts = idx.map((v) => String(Math.abs(v))), gap = idx.some((v) => Math.abs(v) >= 10) ? 4 * dpr : 1 * dpr;
  const widths = parts.map((t) => ctx.measureText(t).width);
  const pw = ctx.measureText(prefix).width, sw = ctx.measureText(suffix).width;
  const w = pw + widths.reduce((a, b) => a + b, 0) + gap * (parts.length - 1) + sw;
  ctx.fillStyle = "rgba(0,0,0,0.62)"; ctx.fillRect(x - w / 2 - 3 * dpr, y - 10 * dpr, w + 6 * dpr, 20 * dpr);
  ctx.fillStyle = colour; ctx.strokeStyle = colour; ctx.lineWidth = 1.3 * dpr; ctx.textAlign = "left";
  let cx = x - w / 2;
  if (prefix) { ctx.fillText(prefix, cx, y + 1 * dpr); cx += pw; }
  parts.forEach((t, i) => {
    ctx.fillText(t, cx, y + 1 * dpr);
    if (idx[i] < 0) { ctx.beginPath(); ctx.moveTo(cx + 0.5 * dpr, y - 7 * dpr); ctx.lineTo(cx + widths[i] - 0.5 * dpr, y - 7 * dpr); ctx.stroke(); }
    cx += widths[i] + gap;
  });
  if (suffix) ctx.fillText(suffix, cx - gap, y + 1 * dpr);
  ctx.textAlign = "start";
}

function niceBar(span) { const raw = span / 5, p = Math.pow(10, Math.floor(Math.log10(raw))); for (const m of [1, 2, 5, 10]) if (m * p >= raw) return m * p; return 10 * p; }
function drawScaleBar(v, sv, dpr) {
  const doc = state.data.doc;
  const scale = doc && doc.calibrated ? doc.scale_inv_nm_per_px : sv ? sv.scale_inv_nm_per_px : null;
  if (!scale) return;
  const u = unit(), pxPerInvUnit = state.view.s * u.perNm / scale;  // screen px per 1/nm or per 1/angstrom
  const bar = niceBar(cv.width / pxPerInvUnit), w = bar * pxPerInvUnit;
  const x = 18 * dpr, y = cv.height - 22 * dpr;
  ctx.fillStyle = "rgba(0,0,0,0.6)"; ctx.fillRect(x - 6 * dpr, y - 24 * dpr, w + 12 * dpr, 34 * dpr);
  ctx.fillStyle = "#fff"; ctx.fillRect(x, y, w, 5 * dpr);
  ctx.font = `600 ${13 * dpr}px system-ui, sans-serif`; ctx.textAlign = "center";
  ctx.fillText(`${+bar.toPrecision(6)} 1/${u.sym}` + (doc.calibrated ? "" : " (implied)"), x + w / 2, y - 7 * dpr); ctx.textAlign = "start";
}

// crystals 2 and 3 of a several-crystal answer, while solution 1 (crystal 1) is drawn; else null
function furtherCrystals(v, sv) {
  return v && sv && v.solutions.length && state.sol === 0 && v.crystals_view ? v.crystals_view : null;
}

function drawLegend(v, sv) {
  if (!v) { $("legend").innerHTML = ""; return; }
  const cw = furtherCrystals(v, sv);
  const away = new Set();
  if (cw) { for (const c of cw.further) for (const s of c.spots) away.add(s.index); for (const i of cw.cross_double_diffraction) away.add(i); }
  const kinds = new Set((sv ? sv.spots : v.spots).filter((p, i) => !(away.has(i) && (p.kind === "forbidden" || p.kind === "unindexed"))).map((p) => p.kind));
  const items = Object.entries(v.kind_style).filter(([k]) => kinds.has(k)).map(([k, st]) => `<span><i style="border-color:${st.colour}"></i>${esc(st.label)}</span>`);
  if (sv) items.push(`<span><i style="border-color:${v.predicted_colour};border-radius:0"></i>square: where this solution puts a spot (bigger = stronger)</span>`);
  if (cw) {
    // each crystal named in its colour (HTML from saed.report.crystals_report: escaped, overbars)
    items.push(`<span class="crystal" data-crystal="1"><i style="border-color:${v.predicted_colour}"></i>${cw.first_label_html} (spot colours by kind, squares)</span>`);
    cw.further.forEach((c, k) => items.push(`<span class="crystal" data-crystal="${k + 2}" style="color:${c.colour}"><i style="border-color:${c.colour}"></i>${c.label_html} (squares, rings, labels; dashed ring: shared spot)</span>`));
    if (cw.cross_double_diffraction.length) items.push(`<span style="color:${cw.cross_dd_colour}"><i style="border-color:${cw.cross_dd_colour};border-radius:0;border-width:0 0 2px 0"></i>+ double diffraction across crystals</span>`);
    for (const r of cw.relationships_html) items.push(`<span class="crystal-rel">${r}</span>`);
  }
  items.push('<span><i style="border-color:#ff375f;border-radius:0;border-width:0 0 2px 0"></i>centre</span>');
  $("legend").innerHTML = items.join("");
}

// zoom, pan, hover
cv.addEventListener("wheel", (ev) => {
  ev.preventDefault();
  const dpr = window.devicePixelRatio || 1, r = cv.getBoundingClientRect();
  zoomAt((ev.clientX - r.left) * dpr, (ev.clientY - r.top) * dpr, ev.deltaY < 0 ? 1.25 : 0.8);
}, { passive: false });
function zoomAt(sx, sy, k) {
  const [wx, wy] = toWorld(sx, sy), v = state.view;
  v.s = Math.min(Math.max(v.s * k, 0.02), 80); v.tx = sx - v.s * wx; v.ty = sy - v.s * wy; draw();
}
$("zoomin").onclick = () => zoomAt(cv.width / 2, cv.height / 2, 1.4);
$("zoomout").onclick = () => zoomAt(cv.width / 2, cv.height / 2, 1 / 1.4);
$("fit").onclick = () => { fitView(); draw(); };
cv.addEventListener("dblclick", () => { fitView(); draw(); });
$("showlabels").onchange = draw; $("showsim").onchange = draw;
let drag = null;
cv.addEventListener("mousedown", (ev) => { drag = { x: ev.clientX, y: ev.clientY, tx: state.view.tx, ty: state.view.ty }; cv.classList.add("dragging"); });
window.addEventListener("mouseup", () => { drag = null; cv.classList.remove("dragging"); });
cv.addEventListener("mousemove", (ev) => {
  const dpr = window.devicePixelRatio || 1;
  if (drag) { state.view.tx = drag.tx + (ev.clientX - drag.x) * dpr; state.view.ty = drag.ty + (ev.clientY - drag.y) * dpr; draw(); $("tip").hidden = true; return; }
  hover(ev);
});
cv.addEventListener("mouseleave", () => { $("tip").hidden = true; });
function hover(ev) {
  const sv = curSolView(), v = state.data && state.data.view;
  if (!v) return;
  const dpr = window.devicePixelRatio || 1, r = cv.getBoundingClientRect();
  const sx = (ev.clientX - r.left) * dpr, sy = (ev.clientY - r.top) * dpr;
  let bestP = null, bestD = 14 * dpr;
  for (const p of (sv ? sv.spots : v.spots)) { const [px, py] = toScreen(p.x, p.y); const dd = Math.hypot(px - sx, py - sy); if (dd < bestD) { bestD = dd; bestP = p; } }
  const tip = $("tip");
  if (!bestP) { tip.hidden = true; return; }
  const st = v.kind_style[bestP.kind] || v.kind_style.unindexed;
  tip.innerHTML = (bestP.hkl ? `<b>${bestP.label_html || barIdx(bestP.hkl)}</b> ` : "<b>not explained</b> ") + `<span style="color:${st.colour}">${esc(st.label)}</span><br>` +
    (bestP.d_nm != null ? `d ${lenText(bestP.d_nm, 4)} measured` + (bestP.d_calc_nm != null ? `, ${lenText(bestP.d_calc_nm, 4)} calculated` : "") + "<br>" : "") +
    (bestP.d_error_pct != null ? `error ${bestP.d_error_pct >= 0 ? "+" : ""}${fmt(bestP.d_error_pct, 2)} % in d` + (bestP.residual_px != null ? `, ${fmt(bestP.residual_px, 1)} px off the prediction` : "") + "<br>" : "") +
    `x ${fmt(bestP.x, 1)}, y ${fmt(bestP.y, 1)} px`;
  tip.hidden = false;
  const left = ev.clientX - r.left + 16, top = ev.clientY - r.top + 12;
  tip.style.left = Math.min(left, r.width - tip.offsetWidth - 4) + "px"; tip.style.top = Math.min(top, r.height - tip.offsetHeight - 4) + "px";
}
window.addEventListener("resize", () => { if (state.data) { fitView(); draw(); } });

pollStatus();
followResults();
