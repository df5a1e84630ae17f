// The line board page: renders each board the server streams.
"use strict";
const tbody = document.querySelector("#board tbody");
const statusEl = document.getElementById("status");

function cell(tr, text, cls) {
  const td = document.createElement("td");
  td.textContent = text;
  if (cls) td.className = cls;
  tr.appendChild(td);
  return td;
}

function ago(t, now) {
  const s = Math.round((new Date(now) - new Date(t)) / 1000);
  if (s < 60) return s + " s ago";
  if (s < 3600) return Math.round(s / 60) + " min ago";
  return Math.round(s / 3600) + " h ago";
}

function render(b) {
  document.getElementById("line").textContent = b.line ? "— line " + b.line : "— plant";
  statusEl.textContent = (b.error ? "plant store error: " + b.error + " · " : "") +
    "shift " + b.shift + " · updated " + new Date(b.now).toLocaleTimeString();
  tbody.replaceChildren();
  for (const s of b.stations) {
    const tr = document.createElement("tr");
    tr.dataset.station = s.station;
    cell(tr, s.station);
    cell(tr, s.line || "–");
    const u = s.last_unit;
    cell(tr, u ? u.serial + " (" + ago(u.at, b.now) + ")" : "none yet").className = "last-unit";
    cell(tr, u ? u.verdict + (u.fail_code ? " " + u.fail_code : "") : "–", u && u.verdict !== "pass" ? "attn" : "ok");
    cell(tr, u && u.trip_pf != null ? u.trip_pf.toFixed(2) : "–");
    cell(tr, s.shift_yield == null ? "no units" :
      (100 * s.shift_yield).toFixed(1) + " % of " + s.shift_first_tests, s.shift_yield != null && s.shift_yield < 0.95 ? "attn" : "");
    cell(tr, s.check_due ? "DUE: " + s.check_due : "current", s.check_due ? "bad" : "ok");
    cell(tr, s.relays && s.relays.length ? (100 * s.max_wear_fraction).toFixed(1) + " % max" +
      (s.worn_rungs ? ", " + s.worn_rungs + " rung(s) worn" : "") : "–", s.worn_rungs ? "attn" : "");
    cell(tr, String(s.open_drift_alarms), s.open_drift_alarms ? "bad" : "ok").className += " alarms";
    cell(tr, s.reported ? s.backlog + " waiting, heard " + ago(s.reported, b.now) : "never heard",
      s.backlog > 0 ? "attn" : "").className += " backlog";
    tbody.appendChild(tr);
  }
}

function poll() {
  fetch("board.json").then(r => r.json()).then(render).catch(() => { statusEl.textContent = "board unreachable"; });
}

if (window.EventSource) {
  const es = new EventSource("events");
  es.onmessage = e => render(JSON.parse(e.data));
  es.onerror = () => { statusEl.textContent = "reconnecting…"; };
} else {
  poll();
  setInterval(poll, 3000);
}
