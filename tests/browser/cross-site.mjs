// The cross-site attack in real Chromium: a page on a second loopback origin (its own Node server on another
// port) auto-submits HTML forms (urlencoded and text/plain) and fires `fetch(…, {mode: "no-cors"})` POSTs,
// with and without credentials, at every bodiless action of a running demo. The daemon must refuse them
// all: afterwards no alarm is acknowledged, no load reported applied, no test finished.
import http from "node:http";

// The journal kinds the attacked actions write.
const ACTION_KINDS = ["alarm-acknowledged", "load-reported", "test-finished"];

function attackerPage(targets) {
  const forms = [];
  const fetches = [];
  targets.forEach((url, i) => {
    for (const [j, enctype] of ["application/x-www-form-urlencoded", "text/plain"].entries()) {
      forms.push(`<iframe name="sink-${i}-${j}"></iframe><form method="POST" action="${url}" enctype="${enctype}" target="sink-${i}-${j}"><input name="{&quot;reason&quot;:&quot;x&quot;,&quot;a&quot;:&quot;" value="&quot;}"></form>`);
    }
    fetches.push(JSON.stringify(url));
  });
  // The page's own script may be inline: it is the attacker's page, served by the attacker.
  return `<!doctype html><html><body>${forms.join("\n")}
<script>
  for (const f of document.forms) f.submit();
  const urls = [${fetches.join(",")}];
  const sent = [];
  for (const u of urls) {
    for (const credentials of ["include", "omit"]) {
      sent.push(fetch(u, { method: "POST", mode: "no-cors", credentials, body: "{}" }).catch(() => null));
      sent.push(fetch(u, { method: "POST", mode: "no-cors", credentials, headers: { "Content-Type": "text/plain" }, body: "{}" }).catch(() => null));
    }
  }
  Promise.all(sent).then(() => { document.body.dataset.sent = String(sent.length); });
</script></body></html>`;
}

// `api(path, init)` reads the demo as a script would (no Origin, Sec-Fetch-Site or cookies); `context`
// is a Chromium context (one that has signed in as an operator, or any for the no-users demo).
export async function crossSiteAttack({ base, context, api, check }) {
  const frames = (await api("/api/frames")).filter((f) => f.test);
  check(frames.length > 0, "no frame runs a test");
  // A load step armed by a script (no Origin: allowed), so "applied" has something to apply.
  const armed = await api("/api/frames/" + frames[0].id + "/increments", { method: "POST", headers: { "Content-Type": "application/json" }, body: JSON.stringify({ stress_kpa: 400 }) }, true);
  let alarms = [];
  for (let i = 0; i < 40 && alarms.length === 0; i++) {
    alarms = (await api("/api/alarms")).filter((a) => !a.acknowledged_by && !a.acknowledged_at);
    if (alarms.length === 0) await new Promise((r) => setTimeout(r, 250));
  }
  check(alarms.length > 0, "no open alarm to attack");
  const journalBefore = (await api("/api/events?order=newest&limit=1"))[0]?.id ?? 0;
  const targets = [
    ...alarms.map((a) => base + "/api/alarms/" + a.id + "/acknowledge"),
    ...frames.map((f) => base + "/api/frames/" + f.id + "/increments/current/applied"),
    ...frames.map((f) => base + "/api/frames/" + f.id + "/tests/current/finish"),
  ];
  const server = http.createServer((req, res) => { res.writeHead(200, { "content-type": "text/html" }); res.end(attackerPage(targets)); });
  await new Promise((r) => server.listen(0, "127.0.0.1", r));
  const evil = "http://127.0.0.1:" + server.address().port;
  check(!base.startsWith(evil), "the attacker's origin is the daemon's");
  const page = await context.newPage();
  const seen = [];
  page.on("request", (r) => { if (r.url().startsWith(base) && r.method() === "POST") seen.push(r.url()); });
  try {
    await page.goto(evil + "/");
    await page.waitForFunction(() => document.body.dataset.sent, null, { timeout: 15000 });
    await page.waitForTimeout(1500); // the forms' answers land in their frames
  } finally {
    await page.close();
    server.close();
  }
  // Chromium really sent them: every target got a form or a fetch.
  check(targets.every((t) => seen.includes(t)), "Chromium did not send every attack: " + seen.length + " requests");
  const events = await api("/api/events?order=oldest&limit=1000&after=" + journalBefore);
  const done = events.filter((e) => ACTION_KINDS.includes(e.kind));
  check(done.length === 0, "cross-site requests acted: " + JSON.stringify(done));
  const after = await api("/api/alarms");
  for (const a of alarms) {
    const now = after.find((x) => x.id === a.id);
    check(!now || (!now.acknowledged_by && !now.acknowledged_at), "alarm " + a.id + " acknowledged cross-site: " + JSON.stringify(now));
  }
  const still = await api("/api/frames");
  for (const f of frames) check(still.find((x) => x.id === f.id).test, "the test on " + f.id + " was finished");
  return { targets: targets.length, requests: seen.length, armed: armed.status };
}
