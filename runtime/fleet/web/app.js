// godwit fleet page: keeps a copy of the monitor's state from its
// Server-Sent Events stream and draws it. Every text from the network goes
// through textContent, never innerHTML: vehicle names and alert details are
// untrusted input.
"use strict";

const STATES = ["ok", "degraded", "failed", "silent", "offline", "unknown"];
const KEEP_EVENTS = 200;
const vehicles = new Map();
let events = [];
let offsetMs = 0; // monitor clock minus browser clock

function el(tag, cls, text) {
  const e = document.createElement(tag);
  if (cls) e.className = cls;
  if (text !== undefined) e.textContent = text;
  return e;
}

function monitorNowMs() { return Date.now() + offsetMs; }

function ago(ns) {
  if (!ns) return "never";
  const s = Math.max(0, (monitorNowMs() - ns / 1e6) / 1000);
  if (s < 60) return s.toFixed(1) + " s ago";
  if (s < 3600) return Math.floor(s / 60) + " min ago";
  return Math.floor(s / 3600) + " h ago";
}

function clock(ns) {
  const d = new Date(ns / 1e6);
  return d.toLocaleTimeString([], { hour12: false }) + "." + String(d.getMilliseconds()).padStart(3, "0");
}

function fmt(x, digits, unit) { return x === null || x === undefined ? "–" : x.toFixed(digits) + unit; }

function sensorLine(s) {
  const age = s.age_ms === null || s.age_ms < 0 ? "never" : fmt(s.age_ms, 0, " ms");
  const line = el("span", "sensor", s.name + "  " + fmt(s.rate_hz, 1, " Hz") + " · " + age);
  // Older than three periods looks like a silent sensor (the engine's
  // default watchdog factor); the vehicle's own alert says for certain.
  if (s.age_ms === null || s.age_ms < 0 || (s.rate_hz > 0 && s.age_ms > 3000 / s.rate_hz)) line.classList.add("stale");
  if (!s.nis_ok) line.appendChild(el("span", "nis", "NIS"));
  return line;
}

function row(v) {
  const tr = el("tr", "r-" + v.state);
  tr.dataset.vehicle = v.vehicle;
  tr.dataset.state = v.state;
  tr.appendChild(el("td", "name", v.vehicle));
  const st = el("td");
  const badge = el("span", "state s-" + v.state, v.state);
  if (v.reported_state && v.reported_state !== v.state) badge.title = "last reported: " + v.reported_state;
  st.appendChild(badge);
  tr.appendChild(st);
  const al = el("td", "alerts");
  if (v.alerts.length === 0) al.appendChild(el("span", "none", "none"));
  for (const a of v.alerts) {
    const chip = el("span", "alert" + (a.severity === "error" ? " error" : ""), a.code);
    if (a.sensor) chip.appendChild(el("small", "", " " + a.sensor));
    chip.title = a.detail || "";
    al.appendChild(chip);
  }
  tr.appendChild(al);
  const sn = el("td");
  if (v.sensors.length === 0) sn.appendChild(el("span", "none", "–"));
  for (const s of v.sensors) sn.appendChild(sensorLine(s));
  tr.appendChild(sn);
  tr.appendChild(el("td", "num", fmt(v.latency_p99_ms, 1, " ms")));
  const seen = el("td", "num seen", ago(v.last_seen_ns));
  seen.dataset.ns = v.last_seen_ns;
  tr.appendChild(seen);
  return tr;
}

function drawVehicles(changed) {
  const tbody = document.querySelector("#vehicles tbody");
  const names = [...vehicles.keys()].sort();
  tbody.replaceChildren(...names.map((n) => {
    const tr = row(vehicles.get(n));
    if (changed && changed.has(n)) tr.classList.add("flash");
    return tr;
  }));
  document.getElementById("empty").hidden = names.length > 0;
  const counts = Object.fromEntries(STATES.map((s) => [s, 0]));
  for (const v of vehicles.values()) counts[v.state]++;
  const tally = document.getElementById("tally");
  tally.replaceChildren(...STATES.filter((s) => counts[s] > 0 || s === "ok").map((s) => {
    const li = el("li", "");
    li.dataset.state = s;
    li.appendChild(el("b", "", String(counts[s])));
    li.appendChild(document.createTextNode(s));
    return li;
  }));
}

function eventText(e) {
  if (e.event === "state") return (e.from ? e.from + " → " + e.to : "appeared, " + e.to) + (e.detail ? " (" + e.detail + ")" : "");
  const what = e.code + (e.sensor ? " " + e.sensor : "") + (e.track ? " track " + e.track : "");
  return (e.event === "raised" ? "raised " : "cleared ") + what + (e.event === "raised" && e.detail ? ": " + e.detail : "");
}

function drawTimeline() {
  const ol = document.getElementById("timeline");
  ol.replaceChildren(...events.slice().reverse().map((e) => {
    const li = el("li", "ev-" + e.event);
    li.appendChild(el("time", "", clock(e.at_ns)));
    li.appendChild(el("span", "who", e.vehicle));
    li.appendChild(document.createTextNode(eventText(e)));
    return li;
  }));
}

function alertKey(v) { return v.alerts.map((a) => a.code + "/" + (a.sensor || "") + "/" + (a.track || 0)).join(","); }

function apply(kind, data) {
  offsetMs = data.now_ns / 1e6 - Date.now();
  const changed = new Set();
  if (kind === "snapshot") { vehicles.clear(); events = []; }
  for (const v of data.vehicles) {
    // Highlight a row only when what a person watches changed (state or
    // alerts), not on every once-a-second report.
    const old = vehicles.get(v.vehicle);
    if (!old || old.state !== v.state || alertKey(old) !== alertKey(v)) changed.add(v.vehicle);
    vehicles.set(v.vehicle, v);
  }
  events = events.concat(data.events).slice(-KEEP_EVENTS);
  drawVehicles(kind === "update" ? changed : null);
  drawTimeline();
}

function connect() {
  const link = document.getElementById("link");
  const es = new EventSource("events");
  es.addEventListener("open", () => { link.textContent = "live"; link.dataset.live = "yes"; });
  es.addEventListener("error", () => { link.textContent = "reconnecting…"; link.dataset.live = "no"; });
  for (const kind of ["snapshot", "update"]) {
    es.addEventListener(kind, (m) => apply(kind, JSON.parse(m.data)));
  }
}

// Last seen counts up between messages without a redraw of everything.
setInterval(() => {
  for (const td of document.querySelectorAll("td.seen")) td.textContent = ago(Number(td.dataset.ns));
}, 1000);

connect();
