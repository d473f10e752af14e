"use strict";
// Plain script for the shotcheck page: no framework, no external resources.
const $ = (id) => document.getElementById(id);

function headers() {
  const t = $("token").value.trim();
  if (t) sessionStorage.setItem("shotcheck-token", t);
  return t ? { Authorization: "Bearer " + t } : {};
}

function text(el, s) { el.textContent = s; return el; }
// How each event class is written for people: the table detector.model.EVENT_LABELS holds (a test checks it).
const EVENT_LABELS = {"none": "none", "turn_to_turn": "turn-to-turn", "to_ground": "to ground", "discharge_only": "discharge only"};
function eventLabel(ev) { return EVENT_LABELS[ev] || ev; }
function row(cells, tag = "td") {
  const tr = document.createElement("tr");
  for (const c of cells) tr.appendChild(text(document.createElement(tag), c));
  return tr;
}
function fmt(v, digits = 4) {
  if (v === null || v === undefined) return "–";
  if (typeof v === "number") return Number.isInteger(v) ? String(v) : v.toPrecision(digits);
  if (typeof v === "boolean") return v ? "yes" : "no";
  return String(v);
}
function status(msg, isError = false) {
  const s = $("status");
  s.className = isError ? "error" : "";
  text(s, msg);
}

async function answer(resp) {
  let body = null;
  try { body = await resp.json(); } catch (e) { body = null; }
  if (!resp.ok) {
    const d = body && body.detail ? body.detail : resp.statusText;
    const f = body && body.field ? " (field: " + body.field + ")" : "";
    throw new Error(resp.status + ": " + d + f);
  }
  return body;
}

function showVerdict(v) {
  $("result").hidden = false;
  const box = $("verdict");
  box.replaceChildren();
  const p = document.createElement("p");
  p.id = "verdict-line";
  p.className = v.fault_indicated ? "fault" : "nofault";
  let line = v.fault_indicated ? "Fault indicated: " + eventLabel(v.event) : "No fault indicated";
  if (v.fault_indicated && v.fault_time_us !== null) line += ", from " + fmt(v.fault_time_us) + " µs";
  if (v.fault_indicated && v.location !== null) line += ", near " + fmt(v.location, 2) + " of the winding from the line end";
  text(p, line + " (advisory)");
  box.appendChild(p);
  const probs = document.createElement("p");
  text(probs, "Probabilities: " + Object.entries(v.probabilities).map(([k, x]) => eventLabel(k) + " " + (100 * x).toFixed(1) + " %").join(", "));
  box.appendChild(probs);
  if (v.model && typeof v.model.none_threshold === "number" && typeof v.probabilities.none === "number") {
    const dec = document.createElement("p");
    dec.id = "decision-line";
    text(dec, "Decision: probability of no fault " + (100 * v.probabilities.none).toFixed(2) + " % against the threshold "
      + (100 * v.model.none_threshold).toFixed(2) + " % for " + (v.model.none_threshold_kind || "all comparisons")
      + "; a fault is indicated below it (or by a decisive metric alone)");
    box.appendChild(dec);
  }
  const ids = document.createElement("p");
  ids.id = "comparison-line";
  text(ids, "Comparison " + v.id + ": " + v.reference_name + " vs " + v.test_name);
  box.appendChild(ids);

  const tb = $("waveshape").querySelector("tbody");
  tb.replaceChildren();
  const keys = ["kind", "polarity", "peak_kV", "test_voltage_kV", "front_time_us", "time_to_half_us",
    "overshoot_percent", "chopping_time_us", "within_tolerance"];
  for (const k of keys) tb.appendChild(row([k, fmt(v.waveshape.reference[k]), fmt(v.waveshape.test[k])]));

  const ex = $("exceeded");
  ex.replaceChildren();
  for (const e of v.exceeded) ex.appendChild(text(document.createElement("li"), e.metric + ": " + fmt(e.ratio, 3) + " × threshold"));
  if (!v.exceeded.length) ex.appendChild(text(document.createElement("li"), "none"));
  const w = $("warnings");
  w.replaceChildren();
  for (const s of v.warnings) w.appendChild(text(document.createElement("li"), s));
  if (!v.warnings.length) w.appendChild(text(document.createElement("li"), "none"));
  $("report-link").href = v.report_url;
  loadFigures(v.id);
}

async function loadFigures(id) {
  const box = $("figures");
  box.replaceChildren(text(document.createElement("p"), "Drawing the figures…"));
  try {
    const body = await answer(await fetch("/v1/comparisons/" + id + "/figures"));
    box.replaceChildren();
    for (const url of body.figures) {
      const img = document.createElement("img");
      img.src = url;
      img.alt = url.split("/").pop();
      box.appendChild(img);
    }
  } catch (e) {
    box.replaceChildren(text(document.createElement("p"), "Figures unavailable: " + e.message));
  }
}

async function showComparison(id) {
  status("Loading comparison…");
  try {
    showVerdict(await answer(await fetch("/v1/comparisons/" + encodeURIComponent(id))));
    status("");
    $("result").scrollIntoView();
  } catch (e) {
    status(e.message, true);
  }
}

$("compare-form").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const fd = new FormData();
  for (const f of ["reference", "test"]) {
    const files = $(f).files;
    if (!files.length) { status("Pick the " + f + " file(s) first.", true); return; }
    for (const file of files) fd.append(f, file, file.name);
  }
  status("Comparing…");
  try {
    const v = await answer(await fetch("/v1/comparisons", { method: "POST", body: fd, headers: headers() }));
    status("Done.");
    showVerdict(v);
  } catch (e) {
    status(e.message, true);
  }
});

$("sequence-form").addEventListener("submit", async (ev) => {
  ev.preventDefault();
  const id = $("sequence-id").value.trim();
  status("Loading sequence…");
  try {
    const s = await answer(await fetch("/v1/sequences/" + encodeURIComponent(id)));
    status("");
    $("sequence").hidden = false;
    text($("sequence-summary"), s.unit_id + " terminal " + s.terminal + ": " + s.summary.conclusion);
    const tb = $("shots").querySelector("tbody");
    tb.replaceChildren();
    for (const sh of s.shots) {
      const v = sh.comparison && sh.comparison.verdict;
      const verdict = sh.role === "reference" ? "reference" : v ? (v.fault_indicated ? "fault: " + eventLabel(v.event) : "no fault") : "–";
      const tr = row([String(sh.position), sh.name, sh.kind, fmt(sh.level_percent), sh.role, verdict]);
      if (v) {
        const btn = document.createElement("button");
        btn.type = "button";
        btn.className = "show-shot";
        text(btn, "show");
        btn.addEventListener("click", () => showComparison(sh.comparison.id));
        tr.lastChild.appendChild(document.createTextNode(" "));
        tr.lastChild.appendChild(btn);
      }
      tb.appendChild(tr);
    }
  } catch (e) {
    status(e.message, true);
  }
});

const saved = sessionStorage.getItem("shotcheck-token");
if (saved) $("token").value = saved;
