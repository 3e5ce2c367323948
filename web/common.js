// oedolog dashboard, shared part: API calls with the daemon's error shape, the live link (SSE with a
// polling fallback), the simulated-time banner and formatting. It only talks to its own origin and never
// commands a load: the daemon has no such route, a person puts the weights on.
(function () {
  "use strict";
  const O = (window.oedolog = window.oedolog || {});
  O.frames = O.frames || [];
  O.charts = O.charts || {};
  O.health = null;
  O.link = { state: "connecting", since: Date.now(), lastSnapshotAt: 0 };
  const listeners = { frames: [], journal: [], link: [], units: [] };
  O.on = (kind, fn) => listeners[kind].push(fn);
  const emit = (kind, value) => listeners[kind].forEach((fn) => { try { fn(value); } catch (e) { console.error(e); } });

  // ---- API ----------------------------------------------------------------------------------------
  // Resolves to {ok, status, data}; never throws on an HTTP error so forms can show the message by field.
  O.api = async function (method, path, body) {
    const init = { method, headers: { Accept: "application/json" }, credentials: "same-origin" };
    if (body !== undefined) {
      init.headers["Content-Type"] = "application/json";
      init.body = JSON.stringify(body);
    }
    let response;
    try {
      response = await fetch(path, init);
    } catch (e) {
      return { ok: false, status: 0, data: { error: "the daemon cannot be reached (" + e.message + ")" } };
    }
    let data = null;
    const text = await response.text();
    try { data = text ? JSON.parse(text) : null; } catch (e) { data = { error: text.slice(0, 300) }; }
    if (!response.ok && (!data || typeof data !== "object")) data = { error: "HTTP " + response.status };
    if (response.status === 403 && data && !data.error) data.error = "not allowed";
    return { ok: response.ok, status: response.status, data };
  };

  // A sentence for an error reply: a viewer's 403 says plainly that this account only looks.
  O.errorText = function (reply) {
    const d = reply.data || {};
    if (reply.status === 403 && /engineer/.test(d.error || "")) return d.error;
    if (reply.status === 403) return "Your account may view only — an operator has to do this. (" + (d.error || "403") + ")";
    if (reply.status === 401) return "Sign in first (the browser asks for a name and token).";
    let text = d.error || d.message || "HTTP " + reply.status;
    if (d.allowed !== undefined && d.allowed !== null) text += " — allowed: " + (Array.isArray(d.allowed) ? d.allowed.join(", ") : d.allowed);
    return text;
  };

  // ---- formatting ---------------------------------------------------------------------------------
  O.fmt = {
    num(x, digits) { return x === null || x === undefined || !isFinite(x) ? "—" : Number(x).toFixed(digits); },
    sig(x, digits) {
      if (x === null || x === undefined || !isFinite(x)) return "—";
      if (x === 0) return "0";
      const a = Math.abs(x);
      return a >= 1e-3 && a < 1e5 ? Number(x.toPrecision(digits)).toString() : x.toExponential(digits - 1);
    },
    // A span of simulated-or-real seconds in the words a technician reads at a glance.
    span(s) {
      if (s === null || s === undefined || !isFinite(s)) return "—";
      const neg = s < 0; s = Math.abs(s);
      let out;
      if (s < 90) out = Math.round(s) + " s";
      else if (s < 5400) out = Math.round(s / 60) + " min";
      else if (s < 172800) { const h = Math.floor(s / 3600); out = h + " h " + Math.round((s - h * 3600) / 60) + " min"; }
      else out = (s / 86400).toFixed(1) + " days";
      return neg ? "-" + out : out;
    },
    clock(us) {
      if (!us) return "—";
      const d = new Date(us / 1000);
      return d.toISOString().replace("T", " ").slice(0, 16) + " UTC";
    },
  };

  // ---- units --------------------------------------------------------------------------------------
  // The API is SI (kPa, mm, mm²/min, m/s). The lab's [display] choice comes with /healthz, with every unit
  // on offer and its factor (value shown = API value × per_stored); this browser may choose its own,
  // kept in localStorage. Pages draw every value through O.show and re-draw on the "units" event.
  const SI = { stress: { name: "kPa", per_stored: 1 }, length: { name: "mm", per_stored: 1 }, cv: { name: "mm²/min", per_stored: 1 }, k: { name: "m/s", per_stored: 1 } };
  const QUANTITIES = { stress: "Stress", length: "Lengths", cv: "cv", k: "k" };
  const UNITS_KEY = "oedolog.units";
  O.units = Object.assign({}, SI);
  const chosenUnits = () => { try { return JSON.parse(localStorage.getItem(UNITS_KEY) || "{}") || {}; } catch (e) { return {}; } };
  // mv is a compressibility, 1/stress: m²/MN beside kPa, else one over the stress unit.
  const mvUnit = (stress) => (stress.name === "kPa" ? { name: "m²/MN", per_stored: 1000 } : { name: "1/" + stress.name, per_stored: 1 / stress.per_stored });
  function applyUnits() {
    const lab = (O.health && O.health.display) || SI;
    const offered = (O.health && O.health.display_options) || {};
    const mine = chosenUnits();
    const next = {};
    for (const q of Object.keys(QUANTITIES)) next[q] = ((offered[q] || []).find((u) => u.name === mine[q])) || lab[q] || SI[q];
    next.mv = mvUnit(next.stress);
    const changed = JSON.stringify(next) !== JSON.stringify(O.units);
    O.units = next;
    document.body.dataset.units = [next.stress.name, next.length.name, next.cv.name, next.k.name].join(" ");
    renderUnitsPick();
    if (changed) emit("units", next);
  }
  O.units.mv = mvUnit(SI.stress);
  // An API (SI) value of quantity q (stress, length, cv, k, mv) in the chosen unit; null stays null.
  O.show = (q, v) => (v === null || v === undefined || !isFinite(v) ? null : v * O.units[q].per_stored);
  O.unitName = (q) => O.units[q].name;
  // A displayed value typed into a form, back to the API's unit.
  O.toStored = (q, v) => (v === null || v === undefined || !isFinite(v) ? v : v / O.units[q].per_stored);
  // "104.4 tsf": a value in the chosen unit to `digits` significant figures, with its unit.
  O.qty = (q, v, digits) => { const x = O.show(q, v); return x === null ? "—" : O.fmt.sig(x, digits || 4) + " " + O.units[q].name; };
  // A length to the gauge's usual resolution: 0.001 mm, 0.0001 in (common practice for dial and digital gauges).
  O.len = (v) => { const x = O.show("length", v); return x === null ? "—" : x.toFixed(O.units.length.name === "in" ? 4 : 3) + " " + O.units.length.name; };
  O.setUnit = function (q, name) {
    const mine = chosenUnits();
    if (name) mine[q] = name; else delete mine[q];
    try { localStorage.setItem(UNITS_KEY, JSON.stringify(mine)); } catch (e) { /* private mode: this page only */ }
    applyUnits();
  };

  // The switch in the header: one choice per quantity, "lab" meaning the lab's [display] setting.
  function renderUnitsPick() {
    const host = document.getElementById("units-pick");
    const offered = O.health && O.health.display_options;
    if (!host || !offered) return;
    const key = JSON.stringify([O.units, chosenUnits()]);
    if (host.dataset.key === key) return;
    host.dataset.key = key;
    const lab = O.health.display || SI;
    const mine = chosenUnits();
    const selects = Object.entries(QUANTITIES).map(([q, label]) => {
      const id = "units-" + q;
      const select = O.el("select", { id, "data-quantity": q, onchange: (ev) => O.setUnit(q, ev.target.value) },
        O.el("option", { value: "" }, "lab's (" + lab[q].name + ")"),
        ...(offered[q] || []).map((u) => O.el("option", { value: u.name, selected: mine[q] === u.name }, u.name)));
      return O.el("label", { for: id }, label, select);
    });
    const wasOpen = !!host.querySelector("details[open]");
    host.replaceChildren(O.el("details", wasOpen ? { open: true } : {},
      O.el("summary", { title: "Units shown in this browser" }, O.units.stress.name + " · " + O.units.length.name),
      O.el("div", { class: "units-form" }, ...selects, O.el("p", { class: "muted" }, "For this browser only. Stored values and the API stay SI."))));
  }

  // What a ready frame asks for, and since when. When the planned loading is complete (the demo says so
  // when its schedule ends) there is no next load to ask for.
  O.readyLine = function (f) {
    const since = O.readyForS(f);
    const span = since === null ? "" : " for " + O.fmt.span(since);
    if (f.test && f.test.plan_finished) return "Load schedule finished" + span + " — review, then finish the test";
    return "Ready for the next load" + span;
  };

  // Display words of our own for the daemon's states; each has a glyph so colour is never the only cue.
  O.STATES = {
    ready: { word: "Ready", hint: "ready for the next load", glyph: "◆" },
    armed: { word: "Armed", hint: "next load step armed: put the weights on", glyph: "▽" },
    primary: { word: "Settling", hint: "primary consolidation", glyph: "◐" },
    seating: { word: "Seating", hint: "seating load on", glyph: "◔" },
    idle: { word: "Free", hint: "no test running", glyph: "○" },
    finished: { word: "Done", hint: "test finished", glyph: "✓" },
    offline: { word: "No signal", hint: "no valid reading", glyph: "✕" },
  };
  O.stateInfo = (s) => O.STATES[s] || { word: s, hint: "", glyph: "·" };

  // A reading older than this (daemon clock seconds), while the daemon still calls the frame online,
  // is flagged stale on the page; the daemon's own offline limit is longer.
  O.STALE_AFTER_S = 120;

  // Short words for the daemon's alarm codes (its message says the rest).
  O.ALARM_WORDS = {
    stale: "No fresh reading",
    "gauge-travel": "Gauge near end of travel",
    "out-of-range": "Values refused",
    stuck: "Readings frozen",
    "load-drift": "Load off target",
    temperature: "Temperature out of band",
    "bus-errors": "Bus errors",
    "publish-lag": "Publishing behind",
  };

  // The frame's alarms: the daemon's own (raised, perhaps acknowledged, until their condition clears) and
  // what the page can tell from the snapshot without a daemon alarm behind it yet.
  O.alarms = function (f) {
    const out = [];
    const w = f.watch || {};
    const daemon = Array.isArray(f.alarms) ? f.alarms : [];
    const has = (code) => daemon.some((a) => a.code === code);
    for (const a of daemon) {
      out.push({ code: a.code, id: a.id, text: (O.ALARM_WORDS[a.code] || a.code) + (a.acknowledged_by ? " · seen by " + a.acknowledged_by : ""), message: a.message, acknowledged: !!a.acknowledged_by });
    }
    if (f.state === "offline") out.push({ code: "offline", text: f.bus_up ? "No fresh reading" : "Bus down" });
    if (w.pending_reseat) out.push({ code: "reseat", text: "Gauge re-seat to confirm" });
    if (w.load_off && !has("load-drift")) out.push({ code: "load-off", text: "Load off target" });
    if (!has("stale") && f.state !== "offline" && f.reading_age_s !== null && f.reading_age_s > O.STALE_AFTER_S) out.push({ code: "stale", text: "Reading " + O.fmt.span(f.reading_age_s) + " old" });
    return out;
  };

  // The daemon's clock at the snapshot, µs: onset + elapsed, or the reading time + its age.
  O.snapshotNowUs = function (f) {
    if (f.test && f.test.onset_us && f.increment_elapsed_s !== null) return f.test.onset_us + f.increment_elapsed_s * 1e6;
    if (f.last_reading_at && f.reading_age_s !== null) return Date.parse(f.last_reading_at) * 1000 + f.reading_age_s * 1e6;
    return null;
  };

  // Seconds since the frame became ready for its next load; null when it is not ready.
  O.readyForS = function (f) {
    const at = f.test && f.test.ready_us;
    const now = O.snapshotNowUs(f);
    if (f.state !== "ready" || !at || now === null) return null;
    return Math.max(0, (now - at) / 1e6);
  };

  // Seconds until the watch expects end of primary; null when unknown.
  O.etaS = function (f) {
    const w = f.watch;
    const now = O.snapshotNowUs(f);
    if (!w || !w.ready_eta_us || now === null) return null;
    return (w.ready_eta_us - now) / 1e6;
  };

  // Frames needing a person first: ready, re-seat, load off, offline; then armed, settling by ETA, seating, free.
  O.urgency = function (f) {
    const w = f.watch || {};
    if (f.state === "ready") return 0;
    if ((f.alarms || []).some((a) => !a.acknowledged_by)) return 1;
    if (w.pending_reseat) return 1;
    if (w.load_off) return 2;
    if (f.state === "offline") return 3;
    return { armed: 4, primary: 5, seating: 6, idle: 7, finished: 8 }[f.state] ?? 9;
  };
  O.sortFrames = function (frames) {
    return frames.slice().sort((a, b) => {
      const d = O.urgency(a) - O.urgency(b);
      if (d) return d;
      if (a.state === "primary") {
        const ea = O.etaS(a), eb = O.etaS(b);
        if (ea !== eb) return (ea ?? Infinity) - (eb ?? Infinity);
      }
      return String(a.id).localeCompare(String(b.id), undefined, { numeric: true });
    });
  };

  O.el = function (tag, attrs, ...children) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (v === null || v === undefined || v === false) continue;
      if (k === "class") e.className = v;
      else if (k.startsWith("on")) e.addEventListener(k.slice(2), v);
      else e.setAttribute(k, v === true ? "" : v);
    }
    for (const c of children.flat()) if (c !== null && c !== undefined && c !== false) e.append(c.nodeType ? c : String(c));
    return e;
  };

  // ---- banners: simulated time, lost link -------------------------------------------------------------
  function banner(id, cls, text) {
    let b = document.getElementById(id);
    const host = document.getElementById("banners");
    if (!host) return;
    if (!text) { if (b) b.remove(); return; }
    if (!b) { b = O.el("p", { id, class: "banner " + cls, role: "status" }); host.append(b); }
    b.textContent = text;
  }

  // Alarms about the lab as a whole (a bus, a broker the readings are published to): one banner each,
  // in the daemon's words, until the condition clears.
  function labAlarms(alarms) {
    const host = document.getElementById("banners");
    if (!host) return;
    const open = new Set(alarms.map((a) => "lab-alarm-" + a.id));
    host.querySelectorAll("[data-lab-alarm]").forEach((b) => { if (!open.has(b.id)) b.remove(); });
    for (const a of alarms) {
      const seen = a.acknowledged_by ? " (seen by " + a.acknowledged_by + ")" : "";
      banner("lab-alarm-" + a.id, "lab-alarm", "⚠ " + (O.ALARM_WORDS[a.code] || a.code) + ": " + a.message + seen);
      const b = document.getElementById("lab-alarm-" + a.id);
      if (b) { b.dataset.labAlarm = a.code; b.setAttribute("role", "alert"); }
    }
  }

  async function checkHealth() {
    const r = await O.api("GET", "/healthz");
    if (r.ok) {
      O.health = r.data;
      O.health.fetchedAt = Date.now();
      const sim = r.data.simulated_time;
      document.body.dataset.simulated = sim ? "true" : "false";
      applyUnits();
      banner("sim-banner", "sim", sim ? "Demo: simulated time, " + r.data.clock_speed + "× faster than real time; the frames are emulated." : null);
      labAlarms(Array.isArray(r.data.lab_alarms) ? r.data.lab_alarms : []);
    }
    return r.ok;
  }

  function setLink(state) {
    if (O.link.state !== state) { O.link.state = state; O.link.since = Date.now(); emit("link", state); }
    document.body.dataset.link = state;
    const lost = state === "lost";
    banner("link-banner", "lost", lost ? "⚠ Connection to the daemon lost since " + new Date(O.link.since).toLocaleTimeString() + " — values on this page are frozen; retrying." : null);
    const dot = document.getElementById("link-state");
    if (dot) {
      dot.dataset.state = state;
      dot.textContent = { live: "● live", polling: "● live (polling)", lost: "✕ link lost", connecting: "… connecting" }[state] || state;
    }
  }

  function takeFrames(frames) {
    if (!Array.isArray(frames)) return;
    O.frames = frames;
    O.link.lastSnapshotAt = Date.now();
    emit("frames", frames);
  }

  async function poll() {
    const r = await O.api("GET", "/api/frames");
    if (r.ok) { takeFrames(r.data); if (O.link.state !== "live") setLink("polling"); }
    else if (r.status === 0) setLink("lost");
    else if (r.status === 401 || r.status === 403) banner("link-banner", "lost", O.errorText(r));
    return r.ok;
  }

  let source = null;
  function openStream() {
    if (!window.EventSource) return;
    source = new EventSource("/api/stream");
    source.addEventListener("open", () => setLink("live"));
    source.addEventListener("frames", (ev) => { try { takeFrames(JSON.parse(ev.data)); } catch (e) { console.error(e); } });
    source.addEventListener("journal", (ev) => { let v = ev.data; try { v = JSON.parse(ev.data); } catch (e) { /* plain text */ } emit("journal", { id: ev.lastEventId, entry: v }); });
    source.addEventListener("error", () => {
      // The browser retries by itself (resuming with Last-Event-ID); a CLOSED source (e.g. 404) needs us.
      if (source.readyState === EventSource.CLOSED) { source = null; setTimeout(openStream, 10000); }
      if (O.link.state === "live") setLink("polling");
    });
  }

  // Polls when the stream has not brought a snapshot lately, so a quiet or missing stream still shows
  // current values; a failing poll or health check marks the link lost.
  async function tick() {
    if (Date.now() - O.link.lastSnapshotAt > 3000) await poll();
    const healthy = await checkHealth();
    if (!healthy) setLink("lost");
    else if (O.link.state === "lost" || O.link.state === "connecting") setLink(source && source.readyState === 1 ? "live" : "polling");
  }

  O.start = function () {
    setLink("connecting");
    poll();
    checkHealth();
    openStream();
    setInterval(tick, 2000);
  };
  O.refresh = poll;
})();
