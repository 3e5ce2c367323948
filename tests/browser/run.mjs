// Browser suite: real Chromium (Debian's) against the running demo. Asserts on what the pages expose
// (window.oedolog, data-* attributes), never on pixels; saves screenshots for a person to look at.
// Usage: node run.mjs [path/to/oedolog]   (default: target/debug/oedolog)
import fs from "node:fs";
import path from "node:path";
import net from "node:net";
import { spawn } from "node:child_process";
import { openBrowser, repoRoot, startDemo, tempDir } from "./demo.mjs";
import { crossSiteAttack } from "./cross-site.mjs";

const binary = path.resolve(process.argv[2] || path.join(repoRoot, "target/debug/oedolog"));
const shots = path.join(repoRoot, "target/screenshots");
fs.mkdirSync(shots, { recursive: true });
const STATES = ["offline", "idle", "seating", "armed", "primary", "ready", "finished"];
const VIEWER = { username: "vera", password: "viewer-token-3f9a27c1d4" };
const OPERATOR = { username: "otto", password: "operator-token-8b41e6c0a2" };
const ENGINEER = { username: "erik", password: "engineer-token-5d2c9e7f13" };
const AUTH_CONFIG = `[http]
[[http.user]]
name = "${VIEWER.username}"
role = "viewer"
token = "${VIEWER.password}"

[[http.user]]
name = "${OPERATOR.username}"
role = "operator"
token = "${OPERATOR.password}"

[[http.user]]
name = "${ENGINEER.username}"
role = "engineer"
token = "${ENGINEER.password}"

# A band the emulated frames (about 19.5 °C) are outside: every frame raises a temperature alarm.
[alarms]
temperature_band_c = [30.0, 40.0]
`;

const results = [];
class Pending extends Error {}
function check(cond, message) { if (!cond) throw new Error(message); }

async function step(name, fn, timeoutMs = 45000) {
  const started = Date.now();
  let timer;
  try {
    await Promise.race([fn(), new Promise((_, reject) => { timer = setTimeout(() => reject(new Error("timed out after " + timeoutMs + " ms")), timeoutMs); })]);
    results.push({ name, result: "ok", ms: Date.now() - started });
  } catch (e) {
    results.push({ name, result: e instanceof Pending ? "PENDING" : "FAILED", ms: Date.now() - started, why: e.message });
  } finally { clearTimeout(timer); }
}

// Pages report their own errors; any uncaught one fails the suite.
const pageErrors = [];
function watch(page, label) {
  page.on("pageerror", (e) => pageErrors.push(label + ": " + e.message));
  // A script, style or connection the Content-Security-Policy blocked counts as a page error too.
  page.on("console", (m) => { if (m.type() === "error" && /Content Security Policy/i.test(m.text())) pageErrors.push(label + ": " + m.text()); });
  return page;
}

// The page's own files (document, scripts, styles), uncompressed; API replies are data, not weight.
const pageWeight = (page) => page.evaluate(() => {
  const nav = performance.getEntriesByType("navigation")[0];
  const files = performance.getEntriesByType("resource").filter((r) => r.initiatorType === "script" || r.initiatorType === "link" || r.initiatorType === "css");
  return nav.decodedBodySize + files.reduce((sum, r) => sum + r.decodedBodySize, 0);
});

const api = (page, method, url, body) => page.evaluate(async ([m, u, b]) => {
  const r = await fetch(u, { method: m, headers: b === undefined ? {} : { "Content-Type": "application/json" }, body: b === undefined ? undefined : JSON.stringify(b) });
  let data = null; try { data = await r.json(); } catch (e) { /* not JSON */ }
  return { status: r.status, data };
}, [method, url, body]);

// The demo's API as a script reads it (Node's fetch: no Origin, no Sec-Fetch-Site); `raw` answers the status.
const scriptApi = (base, user) => async (p, init = {}, raw = false) => {
  const headers = Object.assign({}, init.headers || {});
  if (user) headers.Authorization = "Basic " + Buffer.from(user.username + ":" + user.password).toString("base64");
  const r = await fetch(base + p, Object.assign({}, init, { headers }));
  if (raw) return { status: r.status };
  if (!r.ok) throw new Error(p + ": HTTP " + r.status + " " + (await r.text()).slice(0, 300));
  return r.json();
};

if (!fs.existsSync(binary)) { console.error("browser suite: no daemon binary at " + binary + " (cargo build --bins first)"); process.exit(1); }

const demo = await startDemo({ binary, label: "demo" });
console.log("browser suite: demo at " + demo.base);
const context = await openBrowser();
const page = watch(await context.newPage(), "open demo");
let chosen = null; // the frame the operator flow takes over
let finishedTest = null; // the demo test it finished, which has load steps

try {
  await step("overview lists every frame", async () => {
    await page.goto(demo.base + "/");
    await page.waitForFunction(() => document.querySelectorAll(".tile[data-frame-id]").length === 4, null, { timeout: 20000 });
    const tiles = await page.$$eval(".tile[data-frame-id]", (els) => els.map((e) => ({ id: e.dataset.frameId, state: e.dataset.state, urgency: Number(e.dataset.urgency), word: e.querySelector(".state-word").textContent })));
    const ids = tiles.map((t) => t.id).sort();
    check(JSON.stringify(ids) === JSON.stringify(["F1", "F2", "F3", "F4"]), "frames on the board: " + ids.join(","));
    for (const t of tiles) { check(STATES.includes(t.state), t.id + " state " + t.state); check(t.word.trim().length > 1, t.id + " has no state word"); }
    for (let i = 1; i < tiles.length; i++) check(tiles[i - 1].urgency <= tiles[i].urgency, "frames needing a person are not first: " + JSON.stringify(tiles));
    const sim = await page.textContent("#sim-banner").catch(() => null);
    check(sim && /simulated/i.test(sim), "no simulated-time banner");
    const bytes = await pageWeight(page);
    check(bytes > 1000 && bytes <= 300 * 1024, "overview page weight " + bytes + " bytes");
    console.log("  overview weight " + bytes + " bytes");
  });

  await step("the board's order and alarms follow the rules", async () => {
    // Synthetic frames through the page's own ordering: people-needed first (ready, re-seat, load off,
    // offline), then armed, settling by soonest end, seating, free.
    const order = await page.evaluate(() => {
      const f = (id, state, extra) => Object.assign({ id, name: id, state, bus_up: true, reading_age_s: 5, increment_elapsed_s: 600, last_reading_at: "2026-01-01T00:00:00Z", test: state === "idle" ? null : { onset_us: 1e15, increment: 2 }, watch: null }, extra);
      const frames = [
        f("idle", "idle"), f("seat", "seating"), f("late", "primary", { watch: { ready_eta_us: 1e15 + 9e9 } }),
        f("soon", "primary", { watch: { ready_eta_us: 1e15 + 7e8 } }), f("armed", "armed"), f("off", "offline"),
        f("loadoff", "primary", { watch: { load_off: true } }), f("reseat", "primary", { watch: { pending_reseat: { at_us: 1e15, jump_mm: -0.4 } } }), f("ready", "ready"),
      ];
      const stale = window.oedolog.alarms(f("x", "primary", { reading_age_s: 900 })).map((a) => a.code);
      const fresh = window.oedolog.alarms(f("y", "primary")).map((a) => a.code);
      return { order: window.oedolog.sortFrames(frames).map((x) => x.id), stale, fresh };
    });
    check(order.order.join(" ") === "ready reseat loadoff off armed soon late seat idle", "order " + order.order.join(" "));
    check(order.stale.includes("stale") && order.fresh.length === 0, "stale alarm " + JSON.stringify(order));
  });

  await step("a ready frame says how long it has been ready", async () => {
    await page.waitForFunction(() => window.oedolog.frames.some((f) => f.state === "ready" && f.test && f.test.ready_us), null, { timeout: 60000 });
    const line = await page.evaluate(() => {
      const f = window.oedolog.frames.find((x) => x.state === "ready" && x.test && x.test.ready_us);
      const tile = document.querySelector('.tile[data-frame-id="' + f.id + '"] [data-role=next]');
      return tile ? tile.textContent : null;
    });
    check(line && /^(Ready for the next load|Load schedule finished) for \d/.test(line), "ready tile says " + JSON.stringify(line));
    // A frame whose planned loading is complete says so instead of asking for a load.
    const done = await page.evaluate(() => window.oedolog.nextLine({ id: "x", state: "ready", increment_elapsed_s: 20000, test: { onset_us: 1e15, ready_us: 1e15 + (20000 - 11400) * 1e6, plan_finished: true } }));
    check(/^Load schedule finished for 3 h 10 min/.test(done), "a finished schedule reads " + JSON.stringify(done));
  });

  await step("overview is live without reloading", async () => {
    const first = await page.evaluate(() => window.oedolog.link.lastSnapshotAt);
    await page.waitForFunction((t) => window.oedolog.link.lastSnapshotAt > t, first, { timeout: 15000 });
    const link = await page.evaluate(() => window.oedolog.link.state);
    check(link === "live", "the page is not on the event stream (link state " + link + ")");
  });

  await step("one vocabulary: the board, /overview and the frame page say the same state words, and no code names", async () => {
    const board = await page.evaluate(() => Object.fromEntries([...document.querySelectorAll(".tile")].map((t) => [t.dataset.frameId, { code: t.dataset.state, word: [...t.querySelector(".state-word").childNodes].filter((n) => n.nodeType === 3).map((n) => n.textContent).join("").trim() }])));
    const words = await page.evaluate(() => Object.fromEntries(Object.entries(window.oedolog.STATES).map(([k, v]) => [k, v.word])));
    for (const [id, t] of Object.entries(board)) check(t.word === words[t.code], id + ": the board says " + JSON.stringify(t.word) + " for " + t.code);
    // Code names look like identifiers: snake_case flags or a bare state code where a word belongs.
    const codeName = /\b[a-z]+(?:_[a-z0-9]+)+\b/;
    const boardText = await page.evaluate(() => document.body.innerText);
    check(!codeName.test(boardText), "the board shows a code name: " + (boardText.match(codeName) || [])[0]);
    const plain = watch(await context.newPage(), "vocabulary");
    await plain.goto(demo.base + "/overview");
    const rows = await plain.evaluate(() => [...document.querySelectorAll("tbody tr")].map((r) => ({ name: r.cells[0].textContent.trim(), code: r.cells[1].className.replace("s-", ""), word: r.cells[1].textContent.trim() })));
    check(rows.length === Object.keys(board).length, "/overview rows " + rows.length);
    for (const r of rows) {
      check(r.word === words[r.code], "/overview says " + JSON.stringify(r.word) + " for " + r.code);
      check(!Object.keys(words).includes(r.word), "/overview shows the state code " + r.word);
    }
    const overviewText = await plain.evaluate(() => document.body.innerText);
    check(!codeName.test(overviewText), "/overview shows a code name: " + (overviewText.match(codeName) || [])[0]);
    check(!/\d{2}:\d{2}:\d{2}\.\d{6}/.test(overviewText), "/overview prints microseconds");
    const id = Object.keys(board)[0];
    await plain.goto(demo.base + "/frame.html?id=" + id);
    await plain.waitForFunction(() => window.oedolog.frame && document.querySelectorAll("#inc-table tbody tr[data-seq]").length > 0, null, { timeout: 20000 });
    const framePage = await plain.evaluate(() => ({ word: [...document.getElementById("state-word").childNodes].filter((n) => n.nodeType === 3).map((n) => n.textContent).join("").trim(), code: document.getElementById("head").dataset.state, text: document.body.innerText }));
    check(framePage.word === words[framePage.code], "the frame page says " + JSON.stringify(framePage.word) + " for " + framePage.code);
    check(!codeName.test(framePage.text), "the frame page shows a code name: " + (framePage.text.match(codeName) || [])[0]);
    await plain.close();
  });

  await page.setViewportSize({ width: 1440, height: 900 });
  await page.screenshot({ path: path.join(shots, "overview-wide.png"), fullPage: true });
  await page.setViewportSize({ width: 390, height: 844 });
  await page.waitForTimeout(300); // a layout pass after the resize, for the screenshot only
  await page.screenshot({ path: path.join(shots, "overview-phone.png"), fullPage: true });
  await page.setViewportSize({ width: 1440, height: 900 });

  await step("frame page charts hold data", async () => {
    // A frame with a finished step, so the e–σ′ curve has points too.
    await page.waitForFunction(() => window.oedolog.frames.some((f) => f.test && f.test.increment >= 3), null, { timeout: 30000 });
    const id = await page.evaluate(() => window.oedolog.frames.filter((f) => f.test && f.test.increment >= 3).sort((a, b) => b.test.increment - a.test.increment)[0].id);
    await page.goto(demo.base + "/frame.html?id=" + id);
    await page.waitForFunction(() => {
      const c = window.oedolog.charts;
      // Readings, not x positions: a step that has just begun may hold a construction point without one.
      const readings = (u) => u.data[1].filter((v) => v != null).length;
      return c.logt && c.sqrt && c.compression && readings(c.logt) > 5 && readings(c.sqrt) > 5 && c.compression.data[0].length >= 2;
    }, null, { timeout: 30000 });
    const info = await page.evaluate(() => ({
      logt: window.oedolog.charts.logt.data[1].filter((v) => v != null).length,
      sqrt: window.oedolog.charts.sqrt.data[1].filter((v) => v != null).length,
      comp: window.oedolog.charts.compression.data[0].length,
      logtLines: (window.oedolog.constructions.logt || []).length,
      sqrtLines: (window.oedolog.constructions.sqrt || []).length,
      rows: document.querySelectorAll("#inc-table tbody tr[data-seq]").length,
      head: document.getElementById("head").dataset.frameId,
    }));
    check(info.head === id, "frame page shows " + info.head + ", not " + id);
    // The e–log σ′ curve is drawn as a path in the order of the test, not in order of stress.
    const path = await page.evaluate(async () => {
      const drawn = (window.oedolog.constructions.compression || []).find((it) => it.path);
      const r = await (await fetch("/api/tests/" + window.oedolog.frame.test.test_id + "/compression")).json();
      const api = ((r.compression || {}).points || []).map((q) => q.stress_kpa);
      return { drawn: drawn ? drawn.path.map((q) => q[0]) : null, api };
    });
    check(path.drawn && path.drawn.length >= 2, "no e–log σ′ path drawn: " + JSON.stringify(path));
    check(JSON.stringify(path.drawn) === JSON.stringify(path.api.slice(0, path.drawn.length)), "e–log σ′ path not in test order: " + JSON.stringify(path));
    check(info.logt > 5 && info.sqrt > 5, "time curves without readings: " + JSON.stringify(info));
    check(info.rows >= 2, "load-step table rows: " + info.rows);
    const bytes = await pageWeight(page);
    check(bytes > 50000 && bytes <= 300 * 1024, "frame page weight " + bytes + " bytes");
    console.log("  frame page weight " + bytes + " bytes");
    console.log("  frame " + id + ": " + JSON.stringify(info));
    // An earlier step's curve loads from the picker.
    await page.click('#seq-pick button[data-seq="1"]');
    await page.waitForFunction(() => window.oedolog.step && window.oedolog.step.seq === 1 && window.oedolog.charts.logt.data[0].length > 5, null, { timeout: 15000 });
  });
  await page.screenshot({ path: path.join(shots, "frame-wide.png"), fullPage: true });
  await page.setViewportSize({ width: 390, height: 844 });
  await page.waitForTimeout(400);
  await page.screenshot({ path: path.join(shots, "frame-phone.png"), fullPage: true });
  await step("on a phone the frame page and the board fit the screen's width", async () => {
    const wide = (p) => p.evaluate(() => ({ scroll: document.documentElement.scrollWidth, client: document.documentElement.clientWidth,
      over: [...document.querySelectorAll("main section, main .tile")].filter((e) => e.getBoundingClientRect().right > document.documentElement.clientWidth + 1).map((e) => e.id || e.className).slice(0, 5) }));
    const framePage = await wide(page);
    check(framePage.scroll <= framePage.client + 1 && framePage.over.length === 0, "the frame page is wider than a phone: " + JSON.stringify(framePage));
    const board = watch(await context.newPage(), "board on a phone");
    await board.setViewportSize({ width: 390, height: 844 });
    await board.goto(demo.base + "/");
    await board.waitForFunction(() => document.querySelectorAll(".tile[data-frame-id]").length === 4, null, { timeout: 20000 });
    const b = await wide(board);
    check(b.scroll <= b.client + 1 && b.over.length === 0, "the board is wider than a phone: " + JSON.stringify(b));
    await board.close();
  });
  await page.setViewportSize({ width: 1440, height: 900 });

  await step("the units switch shows every quantity in the chosen unit, per browser, and back", async () => {
    // Factors from NIST SP 811 (2008) Appendix B.8/B.9, written here independently of the daemon's table:
    // 1 ton-force (short)/ft² = 95.760 52 kPa, 1 in = 25.4 mm exactly, 1 ft² = 0.092 903 04 m² exactly.
    const KPA_PER_TSF = 95.76052;
    const factor = { stress: 1 / KPA_PER_TSF, length: 1 / 25.4, cv: 1440e-6 / 0.09290304, k: 100, mv: KPA_PER_TSF };
    const siFactor = { stress: 1, length: 1, cv: 1, k: 1, mv: 1000 }; // mv in m²/MN beside kPa
    const id = await page.evaluate(() => window.oedolog.frame.id);
    const u = watch(await context.newPage(), "units");
    await u.setViewportSize({ width: 1440, height: 900 });
    await u.goto(demo.base + "/frame.html?id=" + id);
    await u.waitForFunction(() => document.body.dataset.units && document.querySelectorAll("#inc-table tbody td[data-quantity]").length > 4 && document.querySelector("#units-pick select"), null, { timeout: 20000 });
    const cells = () => u.evaluate(() => [...document.querySelectorAll("[data-quantity][data-si]")].filter((e) => e.dataset.si !== "" && e.tagName !== "SELECT").map((e) => ({ q: e.dataset.quantity, si: Number(e.dataset.si), text: e.textContent.trim() })));
    const compare = (list, f, label) => {
      let n = 0;
      for (const c of list) {
        if (!isFinite(c.si) || c.si === 0 || c.text === "—") continue;
        const shown = parseFloat(c.text.replace("−", "-"));
        const want = c.si * f[c.q];
        // Four significant figures at most are shown: half a unit in the third place is the bound.
        check(Math.abs(shown - want) <= 5e-3 * Math.abs(want), label + ": " + c.q + " " + c.si + " (SI) shows " + JSON.stringify(c.text) + ", want " + want);
        n++;
      }
      return n;
    };
    // Whatever happens below, the browser's choice is put back: the other steps share its localStorage.
    const reset = () => u.evaluate(() => localStorage.removeItem("oedolog.units")).catch(() => {});
    try {
      check((await u.evaluate(() => document.body.dataset.units)) === "kPa mm mm²/min m/s", "the demo's lab units are SI");
      const before = await cells();
      const nSi = compare(before, siFactor, "SI");
      await u.click("#units-pick summary");
      for (const [q, name] of [["stress", "tsf"], ["length", "in"], ["cv", "ft²/day"], ["k", "cm/s"]]) await u.selectOption("#units-" + q, name);
      await u.waitForFunction(() => document.body.dataset.units === "tsf in ft²/day cm/s", null, { timeout: 5000 });
      await u.waitForTimeout(200);
      const after = await cells();
      const nUs = compare(after, factor, "US");
      const kinds = new Set(after.filter((c) => c.text !== "—").map((c) => c.q));
      for (const q of ["stress", "cv", "mv", "k"]) check(kinds.has(q), "no " + q + " value on the page to convert: " + [...kinds].join(","));
      const heads = await u.evaluate(() => ({
        table: document.querySelector("#inc-table thead").textContent,
        x: window.oedolog.charts.compression.axes[0].label,
        y: window.oedolog.charts.logt.axes[1].label,
      }));
      check(/tsf/.test(heads.table) && /ft²\/day/.test(heads.table) && /1\/tsf/.test(heads.table) && /cm\/s/.test(heads.table), "table heads not in the chosen units: " + heads.table);
      check(/tsf/.test(heads.x) && /\bin\b/.test(heads.y), "chart axes not in the chosen units: " + JSON.stringify(heads));
      await u.screenshot({ path: path.join(shots, "frame-us-units-wide.png"), fullPage: true });
      await u.setViewportSize({ width: 390, height: 844 });
      await u.waitForTimeout(300);
      await u.screenshot({ path: path.join(shots, "frame-us-units-phone.png"), fullPage: true });
      // The choice is this browser's: it outlives a reload; "lab's" brings back the lab's units.
      await u.reload();
      await u.waitForFunction(() => document.body.dataset.units === "tsf in ft²/day cm/s", null, { timeout: 10000 });
      await u.setViewportSize({ width: 1440, height: 900 });
      await u.click("#units-pick summary");
      for (const q of ["stress", "length", "cv", "k"]) await u.selectOption("#units-" + q, "");
      await u.waitForFunction(() => document.body.dataset.units === "kPa mm mm²/min m/s", null, { timeout: 5000 });
      console.log("  units: " + nSi + " cells checked in SI, " + nUs + " in tsf/in/ft²/day/cm/s");
    } finally {
      await reset();
      await u.close();
    }
  });

  await step("a load step is marked void with a reason, struck through, and counted again", async () => {
    await page.click("#step-tools summary");
    await page.selectOption("#f-void-seq", "1");
    await page.fill("#void-form [name=reason]", "x\u0007");
    await page.click("#void-form button[type=submit]");
    await page.waitForFunction(() => document.querySelector("#void-form").dataset.status, null, { timeout: 10000 });
    const refused = await page.evaluate(() => ({ status: document.querySelector("#void-form").dataset.status, err: document.querySelector('#void-form [data-err-for="reason"]').textContent }));
    check(refused.status === "422" && /U\+0007/.test(refused.err), "a reason with a control character was not refused beside its field: " + JSON.stringify(refused));
    await page.fill("#void-form [name=reason]", "browser test: hanger weights miscounted");
    await page.click("#void-form button[type=submit]");
    await page.waitForSelector('#inc-table tr.void[data-seq="1"]', { timeout: 15000 });
    const row = await page.textContent('#inc-table tr[data-seq="1"] td.flags');
    check(/void: browser test: hanger weights miscounted/.test(row), "the void step's remark: " + row);
    await page.screenshot({ path: path.join(shots, "step-void.png"), fullPage: true });
    await page.click('#step-tools [data-restore="1"] button');
    await page.waitForFunction(() => document.querySelector('#inc-table tr[data-seq="1"]') && !document.querySelector('#inc-table tr.void[data-seq="1"]'), null, { timeout: 15000 });
  });

  await step("operator finishes a test, starts one with the form, arms a load", async () => {
    chosen = await page.evaluate(() => window.oedolog.frame.id);
    finishedTest = await page.evaluate(() => window.oedolog.frame.test.test_id);
    await page.goto(demo.base + "/frame.html?id=" + chosen);
    await page.waitForSelector("#finish-form [data-role=ask]");
    await page.click("#finish-form [data-role=ask]");
    await page.click("#finish-form button[type=submit]");
    await page.waitForSelector("#start-form", { timeout: 15000 });
    // A height out of range: the daemon's message must sit next to that field.
    await page.fill("#f-specimen", "BRW-07-A");
    await page.fill("#f-description", "grey silty clay, browser test");
    await page.fill("#f-height_mm", "1");
    await page.fill("#f-diameter_mm", "50");
    await page.fill("#f-dry_mass_g", "60");
    await page.fill("#f-specific_gravity", "2.68");
    await page.fill("#f-seating_kpa", "5");
    await page.click("#start-form button[type=submit]");
    await page.waitForFunction(() => document.querySelector("#start-form").dataset.status, null, { timeout: 10000 });
    const bad = await page.evaluate(() => ({ status: document.querySelector("#start-form").dataset.status, err: document.querySelector('#start-form [data-err-for="height_mm"]').textContent, invalid: document.querySelector("#f-height_mm").getAttribute("aria-invalid") }));
    check(bad.status === "400" || bad.status === "422", "a 1 mm specimen was not refused: " + JSON.stringify(bad));
    check(bad.err.length > 3 && bad.invalid === "true", "the refusal is not shown next to the height field: " + JSON.stringify(bad));
    await page.screenshot({ path: path.join(shots, "start-form-refused.png"), fullPage: true });
    await page.fill("#f-height_mm", "19.5");
    await page.click("#start-form button[type=submit]");
    await page.waitForSelector("#arm-form", { timeout: 15000 });
    const started = await page.evaluate(() => window.oedolog.frame.test);
    check(started && started.specimen === "BRW-07-A", "the new test is not on the frame: " + JSON.stringify(started));
    // Arming with nothing filled in is refused with a message on the page, and nothing is armed.
    await page.click("#arm-form button[type=submit]");
    await page.waitForFunction(() => document.querySelector("#arm-form").dataset.status, null, { timeout: 10000 });
    const empty = await page.evaluate(() => ({ status: document.querySelector("#arm-form").dataset.status, text: [...document.querySelectorAll("#arm-form .err, #arm-form [data-role=msg]")].map((e) => e.textContent).join(" ").trim() }));
    check((empty.status === "400" || empty.status === "422") && empty.text.length > 3, "an empty arm was not refused visibly: " + JSON.stringify(empty));
    await page.fill("#f-stress_kpa", "25");
    await page.click("#arm-form button[type=submit]");
    await page.waitForFunction(() => document.getElementById("head").dataset.state === "armed", null, { timeout: 15000 });
    const armed = await page.evaluate(() => ({ stress: window.oedolog.frame.test.stress_kpa, safety: document.querySelector("#actions [data-role=safety]")?.textContent || "" }));
    check(armed.stress === 25, "armed stress " + armed.stress);
    check(/never changes the load/i.test(armed.safety), "no caution beside the applied action");
    const tile = await api(page, "GET", "/api/frames");
    check(tile.data.find((f) => f.id === chosen).state === "armed", "the API does not show the frame armed");
    // The wrong stress: withdrawn before the load goes on, then the right one armed.
    await page.click("#withdraw-form button[type=submit]");
    await page.waitForSelector("#arm-form", { timeout: 15000 });
    const back = await page.evaluate(() => window.oedolog.frame.test.state);
    check(back === "seating", "after withdrawing, the test is " + back);
    await page.fill("#f-stress_kpa", "25");
    await page.click("#arm-form button[type=submit]");
    await page.waitForFunction(() => document.getElementById("head").dataset.state === "armed", null, { timeout: 15000 });
  }, 60000);

  await step("a note goes into the frame's journal", async () => {
    await page.fill("#note-text", "browser test: ring checked");
    await page.click("#note-form button[type=submit]");
    await page.waitForFunction(() => document.querySelector("#note-form").dataset.status, null, { timeout: 10000 });
    const status = await page.evaluate(() => document.querySelector("#note-form").dataset.status);
    check(status === "201" || status === "200", "note status " + status);
    await page.waitForFunction(() => [...document.querySelectorAll("#journal li")].some((li) => li.textContent.includes("ring checked")), null, { timeout: 15000 });
  });

  await step("the report page renders", async () => {
    const id = await page.evaluate(() => window.oedolog.frame.test.test_id);
    const link = await page.getAttribute("#report-link a[data-role=report]", "href");
    check(link === "/tests/" + id + "/report", "report link " + link);
    const report = watch(await context.newPage(), "report");
    const reply = await report.goto(demo.base + link);
    check(reply.status() === 200, "report status " + reply.status());
    const text = await report.textContent("body");
    check(text.includes("BRW-07-A"), "the report does not name the specimen");
    check(/qualified engineer/i.test(text), "the report has no caution");
    // The finished demo test has load steps: its report carries a row per step.
    check(finishedTest, "no finished test to report on");
    const full = await report.goto(demo.base + "/tests/" + finishedTest + "/report");
    check(full.status() === 200, "report of test " + finishedTest + ": " + full.status());
    const rows = await report.$$eval("table tr", (trs) => trs.length);
    check(rows >= 5, "the report of a test with load steps has " + rows + " table rows");
    // A figure (log t and √t) for every load step that is not void and has a curve, and none for a void one.
    const figures = await report.evaluate(() => ({
      steps: [...document.querySelectorAll("table.steps-table tr[data-seq]")].map((r) => ({ seq: r.dataset.seq, void: r.classList.contains("void") })),
      figures: [...document.querySelectorAll("figure.step")].map((f) => ({ seq: f.dataset.seq, plots: f.querySelectorAll("svg.step-plot").length, caption: f.querySelector("figcaption").textContent })),
    }));
    const live = figures.steps.filter((s) => !s.void).map((s) => s.seq);
    check(figures.figures.length >= live.length - 1 && figures.figures.length >= 2, "report figures " + figures.figures.length + " for load steps " + live.join(","));
    for (const f of figures.figures) {
      check(live.includes(f.seq) && f.plots === 2, "figure for step " + f.seq + ": " + JSON.stringify(f));
      check(/^Load step \d+ · [\d.]+ kPa — t50 /.test(f.caption), "figure caption " + JSON.stringify(f.caption));
    }
    await report.emulateMedia({ media: "print" });
    await report.screenshot({ path: path.join(shots, "report-print.png"), fullPage: true });
    // Printed on A4 and on Letter: nothing wider than the page, and a PDF of a few pages.
    for (const [format, widthMm] of [["A4", 210], ["Letter", 215.9]]) {
      const usable = Math.floor(((widthMm - 2 * 12) / 25.4) * 96); // the print margins below, in CSS px
      await report.setViewportSize({ width: usable, height: 1000 });
      const overflow = await report.evaluate(() => ({ scroll: document.documentElement.scrollWidth, client: document.documentElement.clientWidth, wide: [...document.querySelectorAll("table, figure, svg")].filter((e) => e.getBoundingClientRect().right > document.documentElement.clientWidth + 1).map((e) => e.tagName + "." + e.className.baseVal + e.className).slice(0, 5) }));
      check(overflow.scroll <= overflow.client + 1 && overflow.wide.length === 0, format + " print width " + usable + " px overflows: " + JSON.stringify(overflow));
      const file = path.join(shots, "report-" + format.toLowerCase() + ".pdf");
      await report.pdf({ path: file, format, margin: { top: "12mm", bottom: "12mm", left: "12mm", right: "12mm" }, printBackground: false });
      const pages = (fs.readFileSync(file, "latin1").match(/\/Type\s*\/Page[^s]/g) || []).length;
      check(pages >= 2 && pages <= 40, format + " PDF has " + pages + " pages");
      console.log("  report " + format + ": " + pages + " pages, " + figures.figures.length + " step figures");
    }
    await report.close();
  });

  await step("a lost connection is shown", async () => {
    await page.goto(demo.base + "/");
    await page.waitForFunction(() => window.oedolog.link.state === "live", null, { timeout: 15000 });
    await demo.stop();
    await page.waitForFunction(() => document.body.dataset.link === "lost" && document.getElementById("link-banner"), null, { timeout: 20000 });
  });
} finally {
  await context.close();
  await demo.stop();
}

// ---- cross-site: another origin's page cannot act, without users --------------------------------------
await step("a page on another origin cannot act (no users)", async () => {
  const open = await startDemo({ binary, config: "[alarms]\ntemperature_band_c = [30.0, 40.0]\n", label: "demo for the cross-site attack" });
  const browser = await openBrowser();
  try {
    const own = watch(await browser.newPage(), "cross-site (own page)");
    await own.goto(open.base + "/");
    const headers = (await own.goto(open.base + "/frame.html?id=F1")).headers();
    check(/frame-ancestors 'none'/.test(headers["content-security-policy"] || "") && headers["x-frame-options"] === "DENY", "security headers: " + JSON.stringify(headers));
    await own.waitForFunction(() => window.oedolog.frame && window.oedolog.charts && window.oedolog.charts.logt, null, { timeout: 20000 });
    const r = await crossSiteAttack({ base: open.base, context: browser, api: scriptApi(open.base), check });
    check(r.armed === 201, "a script (no Origin) could not arm: " + r.armed);
    console.log("  cross-site, no users: " + r.targets + " routes, " + r.requests + " requests sent by Chromium, none acted");
  } finally {
    await browser.close();
    await open.stop();
  }
}, 60000);

// ---- access: a viewer reads and cannot act -----------------------------------------------------------
await step("a viewer cannot act; an operator can, and acknowledges an alarm by name", async () => {
  let authDemo;
  try {
    authDemo = await startDemo({ binary, config: AUTH_CONFIG, label: "demo with users" });
  } catch (e) {
    throw new Pending("`oedolog demo --config` with [[http.user]] did not start: " + e.message.split("\n")[0]);
  }
  const viewer = await openBrowser({ httpCredentials: VIEWER });
  const operator = await openBrowser({ httpCredentials: OPERATOR });
  try {
    const anon = await fetch(authDemo.base + "/api/frames");
    if (anon.status === 200) throw new Pending("the demo ignores [[http.user]]: /api/frames answers 200 without credentials");
    check(anon.status === 401, "no credentials: " + anon.status);
    const v = watch(await viewer.newPage(), "viewer");
    await v.goto(authDemo.base + "/frame.html?id=F1");
    await v.waitForSelector("#note-form");
    await v.waitForFunction(() => window.oedolog.frame, null, { timeout: 15000 });
    await v.fill("#note-text", "a viewer tries to write");
    await v.click("#note-form button[type=submit]");
    await v.waitForFunction(() => document.querySelector("#note-form").dataset.status, null, { timeout: 10000 });
    const shown = await v.evaluate(() => ({ status: document.querySelector("#note-form").dataset.status, text: document.querySelector("#note-form").textContent }));
    check(shown.status === "403", "viewer's note answered " + shown.status);
    check(/view only/i.test(shown.text), "the page does not tell the viewer why: " + shown.text);
    const greyed = await v.evaluate(() => document.body.dataset.readonly === "true" && [...document.querySelectorAll("#actions button")].every((b) => b.disabled));
    check(greyed, "after the 403 the action buttons are still offered to the viewer");
    const arm = await api(v, "POST", "/api/frames/F1/increments", { stress_kpa: 50 });
    check(arm.status === 403, "viewer arming answered " + arm.status);
    const o = watch(await operator.newPage(), "operator");
    await o.goto(authDemo.base + "/frame.html?id=F1");
    await o.waitForFunction(() => window.oedolog.frame, null, { timeout: 15000 });
    const note = await api(o, "POST", "/api/frames/F1/notes", { text: "an operator writes" });
    check(note.status === 201 || note.status === 200, "operator's note answered " + note.status);
    await v.screenshot({ path: path.join(shots, "viewer-refused.png"), fullPage: true });

    // Alarms: the daemon's temperature alarm is on the page; the viewer gets no acknowledge button, the
    // operator acknowledges it and the page then names who did.
    const me = await api(v, "GET", "/api/me");
    check(me.status === 200 && me.data.role === "viewer" && me.data.may_act === false, "viewer's /api/me: " + JSON.stringify(me.data));
    await v.waitForSelector("#frame-alarms [data-alarm=temperature]", { timeout: 15000 });
    check((await v.$$("#frame-alarms [data-ack]")).length === 0, "a viewer is offered an acknowledge button");
    await o.waitForSelector("#frame-alarms [data-alarm=temperature] [data-ack]", { timeout: 15000 });
    await o.click("#frame-alarms [data-alarm=temperature] [data-ack]");
    await o.waitForFunction(() => /seen by/.test(document.querySelector("#frame-alarms [data-alarm=temperature]")?.textContent || ""), null, { timeout: 10000 });
    const acked = await api(o, "GET", "/api/alarms");
    const mine = (acked.data || []).find((a) => a.frame === "F1" && a.code === "temperature");
    check(mine && mine.acknowledged_by === OPERATOR.username, "the alarm is not acknowledged by the operator: " + JSON.stringify(mine));
    await o.screenshot({ path: path.join(shots, "alarm-acknowledged.png"), fullPage: false });

    // The signed-in operator's browser opens another site's page: its forms and fetches carry the
    // operator's cached credentials and still change nothing.
    const attack = await crossSiteAttack({ base: authDemo.base, context: operator, api: scriptApi(authDemo.base, OPERATOR), check });
    check(attack.armed === 201, "the operator's script could not arm: " + attack.armed);
    console.log("  cross-site, signed-in operator: " + attack.targets + " routes, " + attack.requests + " requests, none acted");
  } finally {
    await viewer.close();
    await operator.close();
    await authDemo.stop();
  }
}, 60000);

// ---- review: an engineer adjusts a construction and approves; a viewer sees it -------------------------
await step("an engineer drags a √t window, sees t90 change before saving, saves it; a viewer sees who; the report shows the approval", async () => {
  const reviewDemo = await startDemo({ binary, config: AUTH_CONFIG, label: "demo for the review" });
  const engineer = await openBrowser({ httpCredentials: ENGINEER });
  const viewer = await openBrowser({ httpCredentials: VIEWER });
  const asEngineer = scriptApi(reviewDemo.base, ENGINEER);
  try {
    // A frame whose first load step has ended.
    let frame = null;
    for (let i = 0; i < 60 && !frame; i++) {
      const frames = await asEngineer("/api/frames");
      frame = frames.find((f) => f.test && f.test.increment >= 2);
      if (!frame) await new Promise((r) => setTimeout(r, 1000));
    }
    check(frame, "no frame reached its second load step");
    const id = frame.test.test_id;
    const before = await asEngineer("/api/tests/" + id + "/compression");
    const proposalT90 = before.increments[0].t90_min;
    check(proposalT90 > 0, "step 1 has no t90 to adjust: " + JSON.stringify(before.increments[0]));
    const e = watch(await engineer.newPage(), "engineer");
    await e.setViewportSize({ width: 1440, height: 900 });
    await e.goto(reviewDemo.base + "/frame.html?id=" + frame.id);
    await e.waitForFunction(() => window.oedolog.frame && window.oedolog.mayReview, null, { timeout: 20000 });
    await e.click('#seq-pick button[data-seq="1"]');
    await e.waitForFunction(() => window.oedolog.step && window.oedolog.step.seq === 1 && document.querySelector("#step-review-form h3")?.textContent.startsWith("Load step 1"), null, { timeout: 15000 });
    // On a tablet a window is drawn with a finger (pointer events of type touch, as a touch screen sends).
    const touched = await e.evaluate((t90) => {
      const u = window.oedolog.charts.sqrt, at = (t) => u.valToPos(Math.sqrt(t), "x");
      const send = (type, x) => u.over.dispatchEvent(new PointerEvent(type, { pointerType: "touch", bubbles: true, clientX: u.over.getBoundingClientRect().left + x, clientY: u.over.getBoundingClientRect().top + 20 }));
      document.getElementById("rv-taylor_window_min-from").value = "";
      send("pointerdown", at(0.3 * t90)); send("pointerup", at(1.2 * t90));
      return Number(document.getElementById("rv-taylor_window_min-from").value) / t90;
    }, proposalT90);
    check(Math.abs(touched - 0.3) < 0.05, "a finger's window starts at " + touched + "·t90, not 0.3·t90");
    await e.waitForFunction(() => document.getElementById("step-review-form").dataset.preview, null, { timeout: 10000 });
    await e.evaluate(() => { delete document.getElementById("step-review-form").dataset.preview; });
    // Drag across the √t chart from √(0.5·t90) to √(1.6·t90): a window reaching past the straight part (U ≳ 60 %,
    // where the √t curve bends), so the line is flatter and t90 comes later (computed on the Terzaghi curve).
    const box = await e.evaluate((t90) => {
      const u = window.oedolog.charts.sqrt, r = u.over.getBoundingClientRect();
      return { y: r.top + r.height / 2, a: r.left + u.valToPos(Math.sqrt(0.5 * t90), "x"), b: r.left + u.valToPos(Math.sqrt(1.6 * t90), "x") };
    }, proposalT90);
    await e.mouse.move(box.a, box.y);
    await e.mouse.down();
    await e.mouse.move((box.a + box.b) / 2, box.y, { steps: 4 });
    await e.mouse.move(box.b, box.y, { steps: 4 });
    await e.mouse.up();
    await e.waitForFunction(() => document.getElementById("step-review-form").dataset.preview, null, { timeout: 10000 });
    const shown = await e.evaluate(() => ({
      status: document.getElementById("step-review-form").dataset.preview,
      from: document.getElementById("rv-taylor_window_min-from").value,
      to: document.getElementById("rv-taylor_window_min-to").value,
      text: document.querySelector("#step-review-form [data-role=preview]").textContent,
      values: window.oedolog.preview && window.oedolog.preview.values,
      drawn: window.oedolog.preview && window.oedolog.preview.reduction && window.oedolog.preview.reduction.taylor.t90_min,
    }));
    check(shown.status === "200" && shown.values, "the preview failed: " + JSON.stringify(shown));
    const t90 = shown.values.t90_min;
    check(t90 > 1.03 * proposalT90, "t90 did not come later with the late window: " + t90 + " vs " + proposalT90 + " " + JSON.stringify(shown));
    check(shown.drawn === t90 && /proposal/.test(shown.text), "the preview is not drawn: " + JSON.stringify(shown));
    check((await asEngineer("/api/tests/" + id)).revisions.length === 0, "a preview stored a revision");
    await e.screenshot({ path: path.join(shots, "review-preview-wide.png"), fullPage: true });
    await e.fill("#rv-step-reason", "browser test: bedding excluded from the straight part");
    await e.click("#step-review-form button[type=submit]");
    await e.waitForFunction(() => document.getElementById("step-review-form")?.dataset.status || document.querySelector("#review-list li"), null, { timeout: 10000 });
    const detail = await asEngineer("/api/tests/" + id);
    check(detail.revisions.length === 1 && detail.revisions[0].by === ENGINEER.username && detail.revisions[0].in_force, "the revision: " + JSON.stringify(detail.revisions));
    const saved = (await asEngineer("/api/tests/" + id + "/compression")).increments[0];
    check(Math.abs(saved.t90_min - t90) < 1e-9 && Math.abs(saved.proposal.t90_min - proposalT90) < 1e-9, "adjusted and proposal: " + JSON.stringify(saved));

    // A viewer sees the adjusted value and who made it, and no controls.
    const v = watch(await viewer.newPage(), "viewer (review)");
    await v.goto(reviewDemo.base + "/frame.html?id=" + frame.id);
    await v.waitForFunction(() => window.oedolog.frame && document.querySelector("#review-list li"), null, { timeout: 20000 });
    await v.click('#seq-pick button[data-seq="1"]');
    await v.waitForFunction((t) => window.oedolog.analysis[1] && Math.abs(window.oedolog.analysis[1].taylor.t90_min - t) < 1e-9, t90, { timeout: 15000 });
    const seen = await v.evaluate(() => ({ list: document.getElementById("review-list").textContent, tools: !!document.getElementById("review-tools") }));
    check(/erik/.test(seen.list) && /√t straight-line window/.test(seen.list) && !seen.tools, "the viewer's review panel: " + JSON.stringify(seen));
    await v.screenshot({ path: path.join(shots, "review-viewer-wide.png"), fullPage: true });

    // Approved; the report says by whom.
    await e.fill("#rv-note", "browser test: reviewed");
    await e.click("#approve-form button[type=submit]");
    await e.waitForFunction(() => /Reviewed and approved by/.test(document.getElementById("review-panel").textContent), null, { timeout: 10000 });
    const report = watch(await engineer.newPage(), "report (review)");
    await report.goto(reviewDemo.base + "/tests/" + id + "/report");
    const text = await report.textContent("body");
    check(/Reviewed and approved by erik/.test(text) && /Adjustments by the engineer/.test(text) && /qualified engineer/i.test(text), "the report does not show the approval");
    await report.emulateMedia({ media: "print" });
    await report.screenshot({ path: path.join(shots, "report-approved.png"), fullPage: true });
    await e.setViewportSize({ width: 390, height: 844 });
    await e.waitForTimeout(300);
    await e.screenshot({ path: path.join(shots, "review-phone.png"), fullPage: true });
  } finally {
    await engineer.close();
    await viewer.close();
    await reviewDemo.stop();
  }
}, 90000);

// ---- fleet: three labs' demos publish into one broker; the board in Chromium lists them all ---------------
// A free loopback port, and a process that is ready once a line of its output matches `ready`.
const freePort = () => new Promise((resolve) => { const srv = net.createServer(); srv.listen(0, "127.0.0.1", () => { const { port } = srv.address(); srv.close(() => resolve(port)); }); });
function startProcess(program, args, ready, label) {
  const child = spawn(program, args, { stdio: ["ignore", "pipe", "pipe"], env: { ...process.env, RUST_LOG: process.env.RUST_LOG || "warn" } });
  let out = "";
  const stop = () => new Promise((resolve) => {
    if (child.exitCode !== null || child.signalCode !== null) return resolve();
    child.once("exit", () => resolve());
    child.kill("SIGTERM");
  });
  return new Promise((resolve, reject) => {
    const timer = setTimeout(() => { stop(); reject(new Error(label + ": not ready in 30 s:\n" + out.slice(-2000))); }, 30000);
    const look = (chunk) => {
      out += chunk.toString();
      const m = out.match(ready);
      if (m) { clearTimeout(timer); resolve({ match: m, stop, pid: child.pid, output: () => out }); }
    };
    child.stdout.on("data", look);
    child.stderr.on("data", look);
    child.once("exit", (code, signal) => { clearTimeout(timer); reject(new Error(label + " exited (" + (code ?? signal) + "):\n" + out.slice(-2000))); });
  });
}

await step("three labs publish to one broker; the fleet board in Chromium lists every frame, and a killed lab goes offline; the broker gone, a lab's page shows the publish-lag banner", async () => {
  const dir = tempDir("oedolog-fleet-");
  const port = await freePort();
  fs.writeFileSync(path.join(dir, "mosquitto.conf"), "listener " + port + " 127.0.0.1\nallow_anonymous true\nlog_dest stderr\n");
  const broker = await startProcess("mosquitto", ["-c", path.join(dir, "mosquitto.conf")], / running/, "mosquitto");
  const labs = ["north", "south", "west"];
  const demos = [];
  let board = null, browser = null;
  try {
    // keep_alive_s = 5: the broker sends a dead lab's last will within 1.5 keep-alives (MQTT 3.1.1 §3.1.2.10).
    for (const lab of labs) {
      demos.push(await startDemo({ binary, frames: 2, speed: 500, label: "demo " + lab, config:
        `[[publish.mqtt]]\nurl = "mqtt://127.0.0.1:${port}"\nclient_id = "bt${lab}"\ntopic_prefix = "oedolog-bt"\nlab = "${lab}"\nkeep_alive_s = 5\nlag_alarm_s = 10\n` }));
    }
    fs.writeFileSync(path.join(dir, "fleet.toml"), `[fleet]\nquiet_after_s = 20\n\n[[fleet.broker]]\nurl = "mqtt://127.0.0.1:${port}"\nclient_id = "btboard"\ntopic_prefix = "oedolog-bt"\n\n[http]\nlisten = "127.0.0.1:0"\n`);
    board = await startProcess(binary, ["fleet", "--config", path.join(dir, "fleet.toml")], /listening on (http:\/\/[^\s/]+)\//, "oedolog fleet");
    const base = board.match[1];
    browser = await openBrowser();
    const page = watch(await browser.newPage(), "fleet board");
    // The page as a person reads it: the frames table's lab and frame cells, the labs table's status cells.
    const read = async () => {
      await page.goto(base + "/");
      return page.evaluate(() => {
        const [frames, labsTable] = document.querySelectorAll("table");
        const rows = (t) => [...t.querySelectorAll("tbody tr")].map((r) => [...r.cells].map((c) => c.textContent.trim()));
        return { frames: rows(frames).filter((r) => r.length > 2), labs: rows(labsTable) };
      });
    };
    let seen = null;
    for (let i = 0; i < 40; i++) {
      seen = await read();
      if (labs.every((l) => seen.frames.filter((r) => r[0] === l).length === 2)) break;
      await page.waitForTimeout(500);
    }
    for (const l of labs) check(seen.frames.filter((r) => r[0] === l).length === 2, "lab " + l + " does not show its 2 frames: " + JSON.stringify(seen));
    check(labs.every((l) => seen.labs.some((r) => r[0] === l && /online/i.test(r.join(" ")))), "labs not online: " + JSON.stringify(seen.labs));
    await page.setViewportSize({ width: 1440, height: 900 });
    await page.screenshot({ path: path.join(shots, "fleet-wide.png"), fullPage: true });
    // kill -9 one lab: no DISCONNECT, so the broker publishes its will (at once here: the kernel closes the
    // socket; a half-open link would take 1.5 keep-alives).
    const killedAt = Date.now();
    process.kill(demos[1].pid, "SIGKILL");
    let gone = null;
    for (let i = 0; i < 60 && !gone; i++) {
      const v = await read();
      const row = v.labs.find((r) => r[0] === "south");
      if (row && /offline|quiet/i.test(row.join(" "))) gone = { after_s: (Date.now() - killedAt) / 1000, row };
      else await page.waitForTimeout(500);
    }
    check(gone && gone.after_s <= 1.5 * 5 + 10, "south not shown offline within 1.5 keep-alives (+ 10 s): " + JSON.stringify(gone));
    const after = await read();
    check(after.labs.filter((r) => /online/i.test(r.join(" "))).length === 2, "the other labs stay online: " + JSON.stringify(after.labs));
    await page.setViewportSize({ width: 390, height: 844 });
    await page.screenshot({ path: path.join(shots, "fleet-phone.png"), fullPage: true });
    const narrow = await page.evaluate(() => ({ scroll: document.documentElement.scrollWidth, client: document.documentElement.clientWidth }));
    check(narrow.scroll <= narrow.client + 1, "the fleet board is wider than a phone: " + JSON.stringify(narrow));
    // The broker goes away: past lag_alarm_s (10 s, real time) a lab's own dashboard says so on a banner.
    await broker.stop();
    const brokerGoneAt = Date.now();
    const labPage = watch(await browser.newPage(), "north dashboard, broker away");
    await labPage.setViewportSize({ width: 390, height: 844 });
    await labPage.goto(demos[0].base + "/");
    const lagBanner = labPage.locator('#banners [data-lab-alarm="publish-lag"]');
    await lagBanner.waitFor({ timeout: 40000 });
    const lagWords = await lagBanner.textContent();
    const lagAfter = (Date.now() - brokerGoneAt) / 1000;
    check(/Publishing behind/.test(lagWords) && lagWords.includes("mqtt://127.0.0.1:" + port + " (lab north)") && /behind the store by more than its limit of 10 s/.test(lagWords),
      "the publish-lag banner does not say what and where: " + lagWords);
    await labPage.screenshot({ path: path.join(shots, "publish-lag-phone.png") });
    const lagFits = await labPage.evaluate(() => document.documentElement.scrollWidth <= document.documentElement.clientWidth + 1);
    check(lagFits, "the publish-lag banner makes the page wider than a phone");
    console.log("  fleet: 3 labs × 2 frames listed; south offline " + gone.after_s.toFixed(1) + " s after kill -9; phone width " + narrow.scroll + "/" + narrow.client + " px; publish-lag banner " + lagAfter.toFixed(1) + " s after the broker stopped");
  } finally {
    if (browser) await browser.close();
    if (board) await board.stop();
    for (const d of demos) await d.stop();
    await broker.stop();
  }
}, 180000);

await step("no page raised an error", async () => { check(pageErrors.length === 0, pageErrors.join("\n")); }, 1000);

console.log("\nbrowser suite (screenshots in " + path.relative(repoRoot, shots) + "/):");
for (const r of results) console.log("  " + r.result.padEnd(8) + " " + r.name + " (" + (r.ms / 1000).toFixed(1) + " s)" + (r.why ? "\n           " + r.why.split("\n").join("\n           ") : ""));
const failed = results.filter((r) => r.result === "FAILED").length;
process.exit(failed ? 1 : 0);
