// padline station screen: draws the state the station sends over
// server-sent events (GET /events) and posts what the technician does
// (POST /scan, /check, /ack, each with this start's token).
"use strict";

const token = document.querySelector('meta[name="padline-token"]').content;
const $ = (id) => document.getElementById(id);

// The words the screen uses for each verdict; shape and colour come from
// the class (screen.css).
const WORDS = { "pass": "PASS", "fail": "FAIL", "station-fault": "STATION FAULT" };
const CLASS = { "pass": "pass", "fail": "fail", "station-fault": "fault" };

// shownAt[run_id] = when the verdict of that run was on screen (Unix ms);
// the browser test reads it to measure the delay after the commit.
window.padlineShownAt = {};

let state = null;

function post(path, text) {
  return fetch(path, {
    method: "POST",
    headers: { "Content-Type": "application/json", "X-Padline-Token": token },
    body: JSON.stringify({ text: text || "" }),
  }).then((r) => {
    if (!r.ok) return r.text().then((t) => showLocal(t.trim()));
  }).catch(() => showLocal("the station does not answer: is padline running?"));
}

function showLocal(msg) {
  const el = $("scanrefused");
  el.textContent = "NOT SENT: " + msg;
  el.hidden = false;
}

function text(id, s) { $(id).textContent = s; }

function fmtPF(v) { return v.toFixed(2) + " pF"; }

function setVerdictClass(c) {
  $("verdict").className = "panel v-" + c;
}

// drawTrip places the unit's trip point on a bar whose middle half spans
// the test limits.
function drawTrip(u, s) {
  const box = $("tripbox");
  if (u.trip_pf === null || !(s.trip_high_pf > s.trip_low_pf)) {
    // Only a unit that never latched has "no trip point" to show; for
    // the others the search never ran.
    box.hidden = u.fail_code !== "no_trip";
    $("tripmark").hidden = true;
    text("triptext", "no trip point anywhere on the ladder");
    return;
  }
  box.hidden = false;
  const span = s.trip_high_pf - s.trip_low_pf;
  let x = 25 + 50 * (u.trip_pf - s.trip_low_pf) / span;
  x = Math.max(0, Math.min(100, x));
  $("tripmark").hidden = false;
  $("tripmark").style.left = x + "%";
  text("triptext", "trip " + fmtPF(u.trip_pf) + "   limits " + fmtPF(s.trip_low_pf) + " \u2026 " + fmtPF(s.trip_high_pf));
}

function drawVerdict(s) {
  const u = s.last;
  $("advice").hidden = true;
  $("refusal").hidden = true;
  $("checkrun").hidden = true;
  $("tripbox").hidden = true;
  $("startcheck").hidden = true;
  if (s.phase === "refused" && s.refusal) {
    setVerdictClass("locked");
    text("word", "LOCKED");
    text("serial", "this station may not test units now");
    const found = s.check.faults && s.check.faults.length ? " \u2014 the check found: " + s.check.faults.join("; ") : "";
    text("why", s.refusal.why + found);
    text("fix", s.refusal.fix);
    $("refusal").hidden = false;
    $("startcheck").hidden = !s.refusal.can_check;
    return;
  }
  if (s.phase === "checking") {
    setVerdictClass("checking");
    text("word", "CHECKING THE STATION");
    text("serial", "shift-start check: " + s.check.done + " of " + s.check.total);
    $("checkbar").style.width = (s.check.total ? 100 * s.check.done / s.check.total : 0) + "%";
    text("checktext", s.check.step || "");
    $("checkrun").hidden = false;
    return;
  }
  if (s.phase === "ended") {
    setVerdictClass("idle");
    text("word", "STOPPED");
    text("serial", s.notice || "");
    return;
  }
  if (s.phase === "testing") {
    setVerdictClass("testing");
    text("word", "TESTING");
    text("serial", s.testing);
    return;
  }
  if (!u) {
    setVerdictClass("idle");
    text("word", "SCAN A UNIT");
    text("serial", "\u00a0");
    return;
  }
  setVerdictClass(CLASS[u.verdict] || "fault");
  text("word", WORDS[u.verdict] || u.verdict);
  text("serial", u.serial + (u.fail_code ? "   " + u.fail_code : ""));
  drawTrip(u, s);
  if (u.do) {
    text("means", (u.verdict === "station-fault" ? "station: " : "the unit ") + u.means + (u.message ? " (" + u.message + ")" : ""));
    text("do", u.do);
    $("advice").hidden = false;
  } else if (u.prior_fails > 0) {
    text("means", "passed after " + u.prior_fails + " fail(s): flagged in the shift log");
    text("do", "keep the unit with the reworked ones");
    $("advice").hidden = false;
  }
}

function fmtLeft(ms) {
  if (ms <= 0) return "due now";
  const m = Math.floor(ms / 60000);
  if (m < 60) return m + " min";
  return Math.floor(m / 60) + " h " + (m % 60) + " min";
}

function drawCheck(s) {
  const c = s.check;
  const parts = [];
  if (c.units_left !== null) parts.push(Math.max(0, c.units_left) + " units");
  if (c.due_ms) parts.push(fmtLeft(c.due_ms - Date.now()));
  let t = parts.length ? "in " + parts.join(" or ") : "no schedule";
  if (c.due) t = "due now";
  text("nextcheck", t);
  text("checkresult", c.result ? "last check " + c.result : "");
}

function drawCounts(s) {
  const c = s.counts;
  text("n-pass", c.pass);
  text("n-fail", c.fail);
  text("n-fault", c.station_fault);
  text("fpy", c.first_pass_yield === null ? "\u2013" : c.first_pass_yield.toFixed(1) + " %");
}

function drawUnits(s) {
  const ol = $("units");
  ol.replaceChildren();
  for (const u of s.units || []) {
    const li = document.createElement("li");
    li.className = "u-" + (CLASS[u.verdict] || "fault");
    const b = document.createElement("b");
    b.textContent = u.verdict === "pass" ? "\u25cb" : u.verdict === "fail" ? "\u25a0" : "\u25b2";
    // On the small panel only the serial's last six characters show.
    const cut = Math.max(0, u.serial.length - 6);
    const pre = document.createElement("span");
    pre.className = "pre";
    pre.textContent = u.serial.slice(0, cut);
    li.append(b, pre, u.serial.slice(cut));
    li.title = u.serial + " " + (WORDS[u.verdict] || u.verdict) + (u.fail_code ? " " + u.fail_code : "");
    ol.append(li);
  }
}

function drawNotices(s) {
  $("repeat").hidden = !s.repeat;
  if (s.repeat) {
    text("repeattext", s.repeat.serial + " already has " + s.repeat.tested + " verdict(s)" +
      (s.repeat.failed ? ", " + s.repeat.failed + " failed" : "") + ".");
  }
  $("scanrefused").hidden = !s.scan_refused;
  if (s.scan_refused) {
    text("scanrefused", "NOT TESTED  " + s.scan_refused.scan + ": " + s.scan_refused.reason);
  }
  $("notice").hidden = !s.notice;
  text("notice", s.notice || "");
  const ws = s.warnings || [];
  $("warnpanel").hidden = ws.length === 0;
  const ul = $("warnings");
  ul.replaceChildren();
  for (const w of ws) {
    const li = document.createElement("li");
    li.textContent = w.text;
    ul.append(li);
  }
}

function draw(s) {
  document.body.classList.toggle("sim", s.simulated);
  $("sim-band").hidden = !s.simulated;
  text("station", (s.station || "station") + (s.fixture ? " \u00b7 " + s.fixture : ""));
  text("variant", s.variant || "");
  text("lot", s.lot || "none");
  text("operator", s.operator || "none");
  drawVerdict(s);
  drawCheck(s);
  drawCounts(s);
  drawUnits(s);
  drawNotices(s);
}

function receive(s) {
  if (state && s.seq <= state.seq) return;
  const newRun = s.last && (!state || !state.last || state.last.run_id !== s.last.run_id) ? s.last.run_id : null;
  state = s;
  draw(s);
  if (newRun !== null) {
    // After the next frame is painted, the verdict is on the screen.
    requestAnimationFrame(() => setTimeout(() => { window.padlineShownAt[newRun] = Date.now(); }, 0));
  }
}

function connect() {
  const es = new EventSource("events");
  es.onopen = () => text("link", "live");
  es.onmessage = (m) => receive(JSON.parse(m.data));
  es.onerror = () => text("link", "reconnecting\u2026");
}

// A barcode scanner types the code and Enter into the focused field; keep
// the focus there unless a button is being used.
$("scanform").addEventListener("submit", (ev) => {
  ev.preventDefault();
  const v = $("scan").value;
  $("scan").value = "";
  if (v.trim() !== "") post("scan", v);
});
$("startcheck").addEventListener("click", () => { post("check"); $("scan").focus(); });
$("ackrepeat").addEventListener("click", () => { post("ack", state && state.repeat ? state.repeat.serial : ""); $("scan").focus(); });
document.addEventListener("click", (ev) => { if (ev.target.tagName !== "BUTTON") $("scan").focus(); });
setInterval(() => { if (state) drawCheck(state); }, 1000);
connect();
