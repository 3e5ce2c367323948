// oedolog dashboard, overview: one tile per frame, the frames needing a person first. Read-only: no
// action is taken from this page.
(function () {
  "use strict";
  const O = window.oedolog;
  const { el, fmt } = O;

  function nextLine(f) {
    if (f.state === "ready") return O.readyLine(f);
    if (f.state === "armed") return "Put the weights on, then mark the load applied";
    if (f.state === "primary") {
      const eta = O.etaS(f);
      if (eta === null) return "End of primary: not yet estimated";
      return eta <= 0 ? "Past its estimated end — still settling" : "End of primary in ~" + fmt.span(eta);
    }
    if (f.state === "seating") return "Seating load on";
    if (f.state === "offline") return "Check the gauge, load cell and bus";
    return "No test on this frame";
  }

  O.nextLine = nextLine;

  function tile(f) {
    const info = O.stateInfo(f.state);
    const t = f.test;
    const alarms = O.alarms(f);
    const stale = alarms.some((a) => a.code === "stale");
    return el("a", { class: "tile", href: "frame.html?id=" + encodeURIComponent(f.id), "data-frame-id": f.id, "data-state": f.state, "data-stale": stale ? "true" : "false", "data-urgency": O.urgency(f) },
      el("div", { class: "head" }, el("span", { class: "name" }, f.name), el("span", { class: "fid" }, f.id)),
      el("div", { class: "state-word" }, el("span", { class: "glyph", "aria-hidden": "true" }, info.glyph), info.word),
      el("div", { class: "state-hint", "data-role": "next" }, nextLine(f)),
      el("dl", { class: "facts" },
        el("dt", {}, "Specimen"), el("dd", {}, t ? t.specimen : "—"),
        el("dt", {}, "Stress"), el("dd", { "data-quantity": "stress", "data-si": t && t.stress_kpa !== null ? t.stress_kpa : "" }, t && t.stress_kpa !== null ? O.qty("stress", t.stress_kpa) : "—"),
        el("dt", {}, "Load step"), el("dd", {}, t ? String(t.increment) : "—"),
        el("dt", {}, "In this step"), el("dd", {}, fmt.span(f.increment_elapsed_s)),
        el("dt", {}, "Gauge reading"), el("dd", { "data-quantity": "length", "data-si": f.displacement_mm ?? "" }, f.displacement_mm === null ? "—" : O.len(f.displacement_mm)),
        el("dt", {}, "Last reading"), el("dd", {}, f.reading_age_s === null ? "never" : fmt.span(f.reading_age_s) + " ago")),
      alarms.length ? el("div", { class: "alarms" }, alarms.map((a) => el("span", { class: "alarm " + a.code + (a.acknowledged ? " acked" : ""), "data-alarm": a.code, title: a.message || a.text }, a.text))) : null);
  }

  function render(frames) {
    const sorted = O.sortFrames(frames);
    document.getElementById("board").replaceChildren(...sorted.map(tile));
    const needs = sorted.filter((f) => O.urgency(f) <= 3).length;
    document.getElementById("summary").textContent = frames.length + " frames · " + (needs ? needs + " need a person now" : "none needs a person now");
    const now = frames.map(O.snapshotNowUs).find((x) => x);
    if (now) document.getElementById("clock").textContent = fmt.clock(now);
  }

  O.on("frames", render);
  O.on("units", () => render(O.frames));
  O.start();
})();
