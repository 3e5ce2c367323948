// oedolog dashboard, one frame: time curves of a load step with the daemon's constructions, the
// e–σ′ curve, the load-step table and the operator's actions. It draws what the API computed and never
// computes results of its own; no action here changes a load — a person puts the weights on.
(function () {
  "use strict";
  const O = window.oedolog;
  const { el, fmt, api } = O;
  const frameId = new URLSearchParams(location.search).get("id") || location.hash.replace(/^#/, "");
  const INK = "#385a86", FIT = "#c07a18", MARK = "#16705b", NODE = "#1f2b33";
  O.frameId = frameId;
  O.analysis = {};
  O.constructions = {};
  let frame = null;
  let selectedSeq = null; // null: follow the current step
  let actionKey = "";

  // ---- data shapes ------------------------------------------------------------------------------------
  // Readings arrive as rows ({t_min, displacement_mm, load_kn}) or as columns; both are accepted.
  function readingColumns(data) {
    const rows = Array.isArray(data) ? data : data && (data.points || data.readings || data.rows);
    if (Array.isArray(rows)) return { t: rows.map((r) => r.t_min), d: rows.map((r) => r.displacement_mm ?? r.d_mm) };
    if (data && Array.isArray(data.t_min)) return { t: data.t_min, d: data.displacement_mm || data.d_mm || [] };
    return { t: [], d: [] };
  }
  const reductionOf = (data) => (data && (data.reduction || data.analysis)) || data;

  // ---- charts ---------------------------------------------------------------------------------------------
  function chartSize(host) {
    const w = Math.max(260, host.clientWidth || 300);
    return { width: w, height: Math.round(Math.min(340, Math.max(220, w * 0.62))) };
  }

  // Draws lines and marks given in data units after uPlot draws, clipped to the plot area. Each line is
  // sampled, so a straight line in log10 σ′ also draws correctly on an arithmetic axis.
  function overlayHook(getItems) {
    return (u) => {
      const items = getItems() || [];
      const ctx = u.ctx, { left, top, width, height } = u.bbox;
      const [x0, x1] = [u.scales.x.min, u.scales.x.max];
      if (x0 === null || x1 === null || x0 === undefined) return;
      ctx.save();
      ctx.beginPath(); ctx.rect(left, top, width, height); ctx.clip();
      // uPlot leaves the axis text alignment set; labels here read left to right from their anchor.
      ctx.textAlign = "left"; ctx.textBaseline = "alphabetic";
      ctx.lineWidth = 1.6 * devicePixelRatio;
      ctx.font = 12 * devicePixelRatio + "px sans-serif";
      for (const it of items) {
        ctx.strokeStyle = it.color; ctx.fillStyle = it.color;
        ctx.setLineDash(it.dash ? it.dash.map((v) => v * devicePixelRatio) : []);
        ctx.beginPath();
        if (it.fn) {
          const a = it.from ?? x0, b = it.to ?? x1, n = 48;
          const log = u.scales.x.distr === 3;
          for (let i = 0; i <= n; i++) {
            const x = log ? Math.pow(10, Math.log10(a) + (Math.log10(b) - Math.log10(a)) * i / n) : a + (b - a) * i / n;
            const y = it.fn(x);
            const px = u.valToPos(x, "x", true), py = u.valToPos(y, "y", true);
            i ? ctx.lineTo(px, py) : ctx.moveTo(px, py);
          }
        } else if (it.path) {
          // A polyline through points in the order given (the e–log σ′ path in test order).
          it.path.forEach(([x, y], i) => {
            const px = u.valToPos(x, "x", true), py = u.valToPos(y, "y", true);
            i ? ctx.lineTo(px, py) : ctx.moveTo(px, py);
          });
        } else if (it.ring) {
          const [x, y] = it.ring;
          ctx.setLineDash([]);
          ctx.arc(u.valToPos(x, "x", true), u.valToPos(y, "y", true), 8 * devicePixelRatio, 0, 2 * Math.PI);
        } else if (it.dot) {
          const [x, y] = it.dot;
          ctx.arc(u.valToPos(x, "x", true), u.valToPos(y, "y", true), 4.5 * devicePixelRatio, 0, 2 * Math.PI);
          ctx.fill();
        } else if (it.y !== undefined) {
          const py = u.valToPos(it.y, "y", true); ctx.moveTo(left, py); ctx.lineTo(left + width, py);
        } else if (it.x !== undefined) {
          const px = u.valToPos(it.x, "x", true); ctx.moveTo(px, top); ctx.lineTo(px, top + height);
        }
        ctx.stroke();
        if (it.label) {
          ctx.setLineDash([]);
          let px, py;
          if (it.y !== undefined) { px = left + 4 * devicePixelRatio; py = u.valToPos(it.y, "y", true) - 3 * devicePixelRatio; }
          else if (it.x !== undefined) { px = u.valToPos(it.x, "x", true) + 3 * devicePixelRatio; py = top + 13 * devicePixelRatio; }
          else {
            // A sloping line is labelled where it is inside the plot, kept clear of the right edge.
            const a = Math.max(it.from ?? x0, x0), b = Math.min(it.to ?? x1, x1);
            const lx = it.labelAt ?? (u.scales.x.distr === 3 ? Math.pow(10, (Math.log10(a) * 0.3 + Math.log10(b) * 0.7)) : a * 0.3 + b * 0.7);
            px = u.valToPos(lx, "x", true); py = u.valToPos(it.fn(lx), "y", true) - 4 * devicePixelRatio;
          }
          const room = left + width - ctx.measureText(it.label).width - 4 * devicePixelRatio;
          ctx.fillText(it.label, Math.max(left + 2, Math.min(px, room)), Math.max(top + 12 * devicePixelRatio, Math.min(py, top + height - 4)));
        }
      }
      ctx.restore();
    };
  }

  // A drag across a time chart: (chart, from, to) in minutes, for the review panel; the selection box goes.
  function selected(u, chart, toMinutes) {
    if (!(u.select.width > 3) || !O.onChartWindow) return;
    const a = toMinutes(u.posToVal(u.select.left, "x")), b = toMinutes(u.posToVal(u.select.left + u.select.width, "x"));
    u.setSelect({ left: 0, top: 0, width: 0, height: 0 }, false);
    O.onChartWindow(chart, Math.max(0, Math.min(a, b)), Math.max(a, b));
  }

  // The same on a touch screen (uPlot's drag is for a mouse): a finger drawn across the chart sideways.
  const touchWindow = (chart, toMinutes) => (u) => {
    let x0 = null;
    u.over.style.touchAction = "pan-y";
    u.over.addEventListener("pointerdown", (ev) => { if (ev.pointerType !== "mouse") x0 = ev.offsetX; });
    u.over.addEventListener("pointerup", (ev) => {
      const from = x0;
      x0 = null;
      if (from === null || ev.pointerType === "mouse" || Math.abs(ev.offsetX - from) < 6 || !O.onChartWindow) return;
      const a = toMinutes(u.posToVal(Math.min(from, ev.offsetX), "x")), b = toMinutes(u.posToVal(Math.max(from, ev.offsetX), "x"));
      O.onChartWindow(chart, Math.max(0, a), b);
    });
  };

  function makeChart(key, hostId, opts, data) {
    const host = document.getElementById(hostId);
    const old = O.charts[key];
    // New data on the same axes is a setData; another scale or unit (the labels say which) is a new chart.
    const shape = opts.scales.x.distr + "|" + opts.axes.map((a) => a.label).join("|");
    if (old && old.__shape === shape) { old.setData(data); return old; }
    if (old) old.destroy();
    host.replaceChildren();
    const size = chartSize(host);
    // The key under each chart names the lines; uPlot's own legend row only repeated it.
    const u = new uPlot(Object.assign({ legend: { show: false } }, opts, size), data, host);
    u.__shape = shape;
    O.charts[key] = u;
    return u;
  }

  const baseAxis = { stroke: "#56646c", grid: { stroke: "#e1e5e0", width: 1 }, ticks: { stroke: "#c9cfc8", width: 1 } };

  function timeCharts(cols, red) {
    O.lastStep = { cols, red };
    // Everything is drawn in the chosen length unit: L × the API's mm.
    const L = O.units.length.per_stored, lu = O.unitName("length"), ld = lu === "in" ? 4 : 3;
    cols = { t: cols.t, d: cols.d.map((v) => (v === null || v === undefined ? v : v * L)) };
    const nodes = ((red && red.nodes) || []).map((n) => ({ t_min: n.t_min, d_mm: n.d_mm * L }));
    const tay = (red && red.taylor) || {};
    const cas = (red && red.casagrande) || {};
    // Log time needs t > 0; √t takes t ≥ 0. Readings and the binned curve share the x column via join.
    const pos = (t, d) => t.map((x, i) => [x, d[i]]).filter(([x, y]) => x > 0 && y !== null && y !== undefined && isFinite(y));
    const rd = pos(cols.t, cols.d), nd = pos(nodes.map((n) => n.t_min), nodes.map((n) => n.d_mm));
    const logData = uPlot.join([[rd.map((p) => p[0]), rd.map((p) => p[1])], [nd.map((p) => p[0]), nd.map((p) => p[1])]]);
    const sq = (arr) => arr.map(([x, y]) => [Math.sqrt(x), y]);
    // √t keeps the t = 0 reading (the zero of the straight part); log t cannot.
    const zero = (t, d) => t.map((x, i) => [x, d[i]]).filter(([x, y]) => x === 0 && y != null && isFinite(y));
    const rs = sq([...zero(cols.t, cols.d), ...rd]), ns = sq([...zero(nodes.map((n) => n.t_min), nodes.map((n) => n.d_mm)), ...nd]);
    const sqrtData = uPlot.join([[rs.map((p) => p[0]), rs.map((p) => p[1])], [ns.map((p) => p[0]), ns.map((p) => p[1])]]);

    const LC = [];
    if (cas.inflection) LC.push({ fn: (t) => L * (cas.inflection.line.intercept + cas.inflection.line.slope * Math.log10(t)), color: FIT, dash: [6, 4], label: "tangent", labelAt: cas.inflection.t_min });
    if (cas.secondary) LC.push({ fn: (t) => L * (cas.secondary.line.intercept + cas.secondary.line.slope * Math.log10(t)), color: FIT, dash: [6, 4], label: "secondary", from: Math.max(cas.secondary.t_start_min / 4, 1e-3) });
    if (cas.d0_mm != null) LC.push({ y: L * cas.d0_mm, color: MARK, dash: [2, 3], label: "d0" });
    if (cas.d50_mm != null) LC.push({ y: L * cas.d50_mm, color: MARK, dash: [2, 3], label: "d50" });
    if (cas.d100_mm != null) LC.push({ y: L * cas.d100_mm, color: MARK, dash: [2, 3], label: "d100" });
    if (cas.t50_min) LC.push({ x: cas.t50_min, color: MARK, dash: [2, 3], label: "t50" });
    if (cas.t100_min) LC.push({ x: cas.t100_min, color: MARK, dash: [2, 3], label: "t100" });
    const S = [];
    if (tay.straight) S.push({ fn: (r) => L * (tay.straight.line.intercept + tay.straight.line.slope * r), color: FIT, dash: [6, 4], label: "straight part", labelAt: Math.sqrt(tay.straight.t_end_min) * 1.6, from: 0 });
    if (tay.construction_line) S.push({ fn: (r) => L * (tay.construction_line.intercept + tay.construction_line.slope * r), color: FIT, dash: [2, 4], label: "×" + fmt.num(tay.factor, 2), from: 0 });
    if (tay.d0_mm != null) S.push({ y: L * tay.d0_mm, color: MARK, dash: [2, 3], label: "d0" });
    if (tay.d50_mm != null) S.push({ y: L * tay.d50_mm, color: MARK, dash: [2, 3], label: "d50" });
    if (tay.d90_mm != null) S.push({ y: L * tay.d90_mm, color: MARK, dash: [2, 3], label: "d90" });
    if (tay.d100_mm != null) S.push({ y: L * tay.d100_mm, color: MARK, dash: [2, 3], label: "d100" });
    if (tay.t90_min) S.push({ x: Math.sqrt(tay.t90_min), color: MARK, dash: [2, 3], label: "t90" });
    O.constructions.logt = LC; O.constructions.sqrt = S;

    const series = (xLabel, xValue) => [
      { label: xLabel, value: xValue },
      { label: "reading " + lu, stroke: INK, width: 2, spanGaps: true, points: { show: false }, value: (u, v) => fmt.num(v, ld) },
      { label: "binned " + lu, stroke: NODE, width: 0, paths: () => null, points: { show: true, size: 5, stroke: NODE, fill: "#fff" }, value: (u, v) => fmt.num(v, ld) },
    ];
    const yAxis = Object.assign({}, baseAxis, { label: "gauge reading, " + lu, size: 62, values: (u, vals) => vals.map((v) => v.toFixed(ld)) });
    makeChart("logt", "chart-logt", {
      scales: { x: { time: false, distr: 3 }, y: { dir: -1 } },
      axes: [Object.assign({}, baseAxis, { label: "time since loading, min (log scale)" }), yAxis],
      series: series("t min", (u, v) => fmt.sig(v, 3)),
      cursor: { drag: { x: true, y: false, setScale: false } },
      hooks: { draw: [overlayHook(() => O.constructions.logt)], setSelect: [(u) => selected(u, "logt", (v) => v)], ready: [touchWindow("logt", (v) => v)] },
    }, logData);
    // Taylor's construction lives in the early part: unless the whole step is asked for, √t runs to 2.5·√t90
    // (or 2.5× the straight part's end), where the construction and its labels have room.
    const whole = document.getElementById("sqrt-whole").checked;
    const focus = tay.t90_min ? 2.5 * Math.sqrt(tay.t90_min) : tay.straight ? 2.5 * Math.sqrt(tay.straight.t_end_min) : null;
    // A chart kept across steps keeps its range functions: they read the step shown now from O.sqrtView.
    O.sqrtView = { whole, focus, data: sqrtData };
    makeChart("sqrt", "chart-sqrt", {
      scales: { x: { time: false, range: (u, min, max) => { const v = O.sqrtView; return (O.sqrtRange = [0, !v.whole && v.focus && v.focus < max ? v.focus : max > 0 ? max : 1]); } }, y: { dir: -1, range: (u, min, max) => {
        // The y range of what is in view, so zooming in on x does not leave the curve a flat line.
        const { whole, focus, data } = O.sqrtView;
        if (whole || !focus) return [min, max];
        const ys = data[1].filter((y, i) => y != null && data[0][i] <= focus);
        if (!ys.length) return [min, max];
        const lo = Math.min(...ys), hi = Math.max(...ys), pad = (hi - lo) * 0.06 || 0.001;
        return [lo - pad, hi + pad];
      } } },
      axes: [Object.assign({}, baseAxis, { label: "√time, √min" }), yAxis],
      series: series("√t", (u, v) => (v === null ? "—" : fmt.num(v, 2) + " (" + fmt.sig(v * v, 3) + " min)")),
      // An engineer drags across the readings to choose the straight part (review.js); nobody zooms by it.
      cursor: { drag: { x: true, y: false, setScale: false } },
      hooks: { draw: [overlayHook(() => O.constructions.sqrt)], setSelect: [(u) => selected(u, "sqrt", (v) => v * v)], ready: [touchWindow("sqrt", (v) => v * v)] },
    }, sqrtData);

    const cvT = red && red.cv_taylor, cvC = red && red.cv_casagrande;
    const bits = [
      "t50 " + fmt.sig(cas.t50_min ?? tay.t50_min, 3) + " min",
      "t90 " + fmt.sig(tay.t90_min, 3) + " min",
      "d100 " + O.len(cas.d100_mm ?? tay.d100_mm),
      "cv(√t) " + O.qty("cv", cvT && cvT.cv_mm2_per_min, 3),
      "cv(log t) " + O.qty("cv", cvC && cvC.cv_mm2_per_min, 3),
    ];
    const choice = red && red.cv_choice;
    if (choice) bits.push(choice.cv_mm2_per_min != null ? "proposed " + O.qty("cv", choice.cv_mm2_per_min, 3) + " — " + choice.reason : "no cv proposed — " + choice.reason);
    const flags = (red && red.flags) || [];
    document.getElementById("step-values").textContent = bits.join(" · ") + (flags.length ? " — " + flags.map((f) => f.message || f.code).join("; ") : "");
  }

  async function loadStep(seq) {
    if (!frame || seq === null || seq === undefined) return;
    const base = "/api/frames/" + encodeURIComponent(frameId) + "/increments/" + seq;
    const [rr, ar] = await Promise.all([api("GET", base + "/readings?max_points=600"), api("GET", base + "/analysis")]);
    const red = ar.ok ? reductionOf(ar.data) : null;
    if (red) O.analysis[seq] = red;
    let cols = rr.ok ? readingColumns(rr.data) : { t: [], d: [] };
    if (!cols.t.length && red && red.nodes) cols = { t: red.nodes.map((n) => n.t_min), d: red.nodes.map((n) => n.d_mm) };
    O.step = { seq, readings: rr.status, analysis: ar.status, points: cols.t.length };
    timeCharts(cols, red);
    if (O.renderReview) O.renderReview();
    const note = document.getElementById("step-values");
    if (!rr.ok && !ar.ok) note.textContent = "No curve for step " + seq + " (" + O.errorText(rr) + ").";
    else if (!red && ar.ok && ar.data.unavailable) note.textContent = "No constructions yet: " + ar.data.unavailable + ".";
  }

  function seqPicker() {
    const t = frame && frame.test;
    const host = document.getElementById("seq-pick");
    if (!t) { host.replaceChildren(el("span", { class: "muted" }, "no test running")); return; }
    const current = (frame.watch && frame.watch.seq) || t.increment;
    const shown = selectedSeq ?? current;
    const buttons = [];
    for (let s = 1; s <= Math.max(current, 1); s++) {
      buttons.push(el("button", { type: "button", "data-seq": s, "aria-pressed": s === shown ? "true" : "false", onclick: () => { selectedSeq = s === current ? null : s; seqPicker(); loadStep(s); } }, s === current ? s + " (now)" : s));
    }
    host.replaceChildren(...buttons);
  }

  // ---- compression --------------------------------------------------------------------------------------
  let compression = null;
  function compressionChart() {
    const c = compression || {};
    const pts = c.points || [];
    const linear = document.getElementById("comp-linear").checked;
    const SF = O.units.stress.per_stored, su = O.unitName("stress");
    const x = pts.map((p) => p.stress_kpa * SF), y = pts.map((p) => p.e);
    const order = x.map((_, i) => i).filter((i) => x[i] > 0 || linear);
    // uPlot wants ascending x; unloading steps repeat stresses. The points are a series in stress order
    // (markers only); the curve itself is drawn as a path in the order of the test — loading, unloading,
    // reloading — so an unload–reload loop reads as a loop.
    const sorted = order.slice().sort((a, b) => x[a] - x[b] || a - b);
    const data = [sorted.map((i) => x[i]), sorted.map((i) => y[i])];
    const items = [{ path: order.map((i) => [x[i], y[i]]), color: INK }];
    // The lines are fitted in log10 of kPa; the chart's x is in the chosen unit.
    const logLine = (line) => (s) => line.intercept + line.slope * Math.log10(s / SF);
    if (c.cc) items.push({ fn: logLine(c.cc.line), color: FIT, dash: [6, 4], label: "Cc " + fmt.num(c.cc.index, 3) });
    if (c.cr) items.push({ fn: logLine(c.cr.line), color: "#65568a", dash: [6, 4], label: "Cr " + fmt.num(c.cr.index, 3) });
    const sp = c.sigma_p_casagrande;
    if (sp) {
      // Casagrande's construction drawn through the points it uses: the horizontal and the tangent pass
      // through the point of greatest curvature on both sides, the bisector runs from it to where it
      // meets the virgin line, and that meeting point is σ′p.
      const m = sp.max_curvature_stress_kpa * SF, p = sp.sigma_p_kpa * SF;
      const lo = Math.min(m, p) / 2.5, hi = Math.max(m, p) * 2.5;
      items.push({ fn: () => sp.max_curvature_e, from: lo, to: hi, color: MARK, dash: [2, 3] });
      items.push({ fn: logLine(sp.tangent), from: m / 2.5, to: m * 2.5, color: MARK, dash: [2, 3] });
      items.push({ fn: logLine(sp.bisector), from: Math.min(m, p) / 1.2, to: Math.max(m, p) * 1.2, color: MARK, dash: [2, 3] });
      items.push({ dot: [m, sp.max_curvature_e], color: MARK });
      items.push({ dot: [p, logLine(sp.virgin)(p)], color: MARK });
      items.push({ x: p, color: MARK, dash: [1, 0], label: "σ′p " + fmt.sig(p, 3) + " " + su });
    }
    // Chosen points (review.js) ringed; a click on the chart names the point nearest it.
    for (const i of O.chosenPoints || []) if (x[i] > 0 || linear) items.push({ ring: [x[i], y[i]], color: FIT });
    O.compressionOrder = sorted;
    O.constructions.compression = items;
    // A few points (or one) would get uPlot's wide default range; pad around the data instead.
    const pad = (lo, hi, min) => { const span = Math.max(hi - lo, min); return [lo - span * 0.15, hi + span * 0.15]; };
    makeChart("compression", "chart-compression", {
      scales: {
        x: { time: false, distr: linear ? 1 : 3, range: linear ? (u, lo, hi) => [0, (hi || 100) * 1.1] : (u, lo, hi) => [Math.pow(10, Math.floor(Math.log10(lo || 1) - 0.05)), Math.pow(10, Math.ceil(Math.log10(hi || 100) + 0.05))] },
        y: { range: (u, lo, hi) => (lo === null || lo === undefined ? [0, 1] : pad(lo, hi, 0.02)) },
      },
      axes: [Object.assign({}, baseAxis, { label: "effective stress σ′, " + su + (linear ? "" : " (log scale)") }), Object.assign({}, baseAxis, { label: "void ratio e", size: 56, values: (u, v) => v.map((a) => a.toFixed(3)) })],
      series: [{ label: "σ′ " + su }, { label: "e", stroke: INK, width: 0, paths: () => null, points: { show: true, size: 7, fill: "#fff" }, value: (u, v) => fmt.num(v, 4) }],
      hooks: { draw: [overlayHook(() => O.constructions.compression)], ready: [(u) => u.over.addEventListener("click", () => {
        const k = u.cursor.idx;
        if (k !== null && k !== undefined && O.onPointClick) O.onPointClick(O.compressionOrder[k]);
      })] },
    }, data);
    const v = [];
    if (c.e0 != null) v.push("e0 " + fmt.num(c.e0, 3));
    if (c.cc) v.push("Cc " + fmt.num(c.cc.index, 3));
    if (c.cr) v.push("Cr " + fmt.num(c.cr.index, 3));
    if (sp) v.push("σ′p (Casagrande) " + O.qty("stress", sp.sigma_p_kpa, 3));
    if (c.sigma_p_work) v.push("σ′p (work) " + O.qty("stress", c.sigma_p_work.sigma_p_kpa, 3));
    if (c.ocr_casagrande != null) v.push("OCR " + fmt.num(c.ocr_casagrande, 2));
    const flags = c.flags || [];
    document.getElementById("comp-values").textContent = (v.length ? v.join(" · ") : pts.length ? "" : "No finished load step yet.") + (flags.length ? " — " + flags.map((f) => f.message || f.code).join("; ") : "");
  }

  // GET /api/tests/{id}/compression is the whole test reduced: {increments: [summary…], compression:
  // {points, cc, cr, sigma_p_casagrande…} | null, compression_unavailable}.
  let summaries = [];
  async function loadCompression() {
    if (!frame || !frame.test) return;
    const r = await api("GET", "/api/tests/" + frame.test.test_id + "/compression");
    O.testReduction = r.ok ? r.data : null;
    compression = r.ok ? r.data.compression || null : null;
    summaries = r.ok ? r.data.increments || [] : [];
    O.compression = compression;
    compressionChart();
    if (!r.ok) document.getElementById("comp-values").textContent = "Curve not available: " + O.errorText(r);
    else if (!compression && r.data.compression_unavailable) document.getElementById("comp-values").textContent = "No curve yet: " + r.data.compression_unavailable;
    renderTable();
    if (O.renderReview) O.renderReview();
  }
  // For the review panel (review.js): draw a previewed reduction, and reload after a saved change.
  O.drawStep = (red) => { if (O.lastStep) timeCharts(O.lastStep.cols, red); };
  O.drawCompression = (c) => { compression = c; compressionChart(); };
  O.reloadReview = () => { if (O.step) loadStep(O.step.seq); loadCompression(); };

  // A table cell of quantity q: the value in the chosen unit, and the API's SI value beside it for checks.
  const qcell = (q, si, digits, attrs) => el("td", Object.assign({ "data-quantity": q, "data-si": si ?? "" }, attrs || {}), fmt.sig(O.show(q, si), digits));
  function renderTable() {
    const u = O.units;
    document.querySelector("#inc-table thead").replaceChildren(el("tr", {},
      el("th", {}, "Step"), el("th", {}, "σ′ " + u.stress.name), el("th", {}, "e"),
      el("th", {}, "cv(√t)", el("br"), u.cv.name), el("th", {}, "cv(log t)", el("br"), u.cv.name), el("th", {}, "Cα(ε)"),
      el("th", {}, "mv", el("br"), u.mv.name), el("th", {}, "k", el("br"), u.k.name), el("th", { style: "text-align:left" }, "Remarks")));
    const body = document.querySelector("#inc-table tbody");
    const pts = ((compression && compression.points) || []).slice();
    const rows = [];
    for (const s of summaries) {
      // State points follow the steps in order; a step without a point (no end yet) gets none.
      const k = pts.findIndex((p) => Math.abs(p.stress_kpa - s.stress_kpa) <= 1e-9 * Math.max(1, s.stress_kpa));
      const p = k >= 0 ? pts.splice(0, k + 1)[k] : {};
      const words = [...(s.flag_messages || s.flags || []), ...(p.flags || []).map((f) => f.message || f.code || f)];
      const cvCell = (method, value) => s.cv_method === method
        ? qcell("cv", value, 3, { class: "proposed", title: "Proposed: " + (s.cv_reason || "") })
        : qcell("cv", value, 3);
      if (s.void) words.unshift("void: " + s.void.reason + (s.void.by ? " (" + s.void.by + ")" : "") + ", left out of the reduction");
      rows.push(el("tr", { "data-seq": s.seq, "data-cv-method": s.cv_method || "", class: s.void ? "void" : "" },
        el("td", {}, s.seq), qcell("stress", s.stress_kpa, 4),
        el("td", {}, fmt.num(p.e, 4)),
        cvCell("taylor", s.cv_taylor_mm2_per_min),
        cvCell("casagrande", s.cv_casagrande_mm2_per_min),
        el("td", {}, fmt.sig(s.c_alpha_strain, 3)),
        qcell("mv", p.mv_per_kpa, 3),
        qcell("k", p.k_m_per_s, 3),
        el("td", { class: "flags" }, [...new Set(words)].join("; "))));
      // On a phone the remarks go on their own full-width line under the step instead of a far-right column.
      if (words.length) rows.push(el("tr", { class: "remarks-row" + (s.void ? " void" : ""), "data-remarks-for": s.seq }, el("td", { colspan: 8, class: "flags" }, el("div", { class: "remarks" }, [...new Set(words)].join("; ")))));
    }
    body.replaceChildren(...(rows.length ? rows : [el("tr", {}, el("td", { colspan: 9, class: "empty-note" }, "No load step yet."))]));
    renderStepTools();
  }

  // Marking a mistaken load step void keeps it and its readings and leaves it out of the reduction; a void
  // step can be counted again. Both are journalled under the user's name.
  let stepToolsKey = null;
  function renderStepTools() {
    const host = document.getElementById("step-tools");
    // Rebuilt only when a step turns void or counts again; a new load step only adds its option, so a form
    // being filled in is never replaced under the user's hands.
    const options = () => summaries.filter((s) => !s.void).map((s) => el("option", { value: s.seq }, s.seq + " — " + O.qty("stress", s.stress_kpa)));
    const key = JSON.stringify(summaries.filter((s) => s.void).map((s) => s.seq)) + (summaries.length ? "+" : "");
    if (key === stepToolsKey) {
      const select = host.querySelector("#f-void-seq");
      if (select && select.options.length !== summaries.filter((s) => !s.void).length) {
        const picked = select.value;
        select.replaceChildren(...options());
        if ([...select.options].some((o) => o.value === picked)) select.value = picked;
      }
      return;
    }
    stepToolsKey = key;
    if (!summaries.length) { host.replaceChildren(); stepToolsKey = null; return; }
    // A new load step re-renders the tools: keep them open, and keep what was being typed.
    const wasOpen = !!host.querySelector("details[open]");
    const typed = host.querySelector("#void-form [name=reason]")?.value || "";
    const picked = host.querySelector("#f-void-seq")?.value;
    const form = el("form", { class: "act", id: "void-form", novalidate: true },
      el("div", { class: "row2" },
        el("div", { class: "field" }, el("label", { for: "f-void-seq" }, "Step"),
          el("select", { id: "f-void-seq", name: "seq" }, ...options())),
        field("reason", "Why it is void", { autocomplete: "off", maxlength: 500 })),
      el("button", { class: "btn quiet", type: "submit" }, "Mark the step void"),
      el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("submit", (ev) => {
      ev.preventDefault();
      submit(form, base() + "/increments/" + form.elements.seq.value + "/void", { reason: form.elements.reason.value.trim() }).then((r) => { if (r.ok) { stepToolsKey = null; loadCompression(); } });
    });
    const restores = summaries.filter((s) => s.void).map((s) => {
      const f = el("form", { class: "act", "data-restore": s.seq },
        el("button", { class: "btn quiet", type: "submit" }, "Count step " + s.seq + " again"),
        el("span", { class: "form-msg", "data-role": "msg" }));
      f.addEventListener("submit", (ev) => { ev.preventDefault(); submit(f, base() + "/increments/" + s.seq + "/restore", {}).then((r) => { if (r.ok) { stepToolsKey = null; loadCompression(); } }); });
      return f;
    });
    form.elements.reason.value = typed;
    if (picked && [...form.elements.seq.options].some((o) => o.value === picked)) form.elements.seq.value = picked;
    host.replaceChildren(el("details", wasOpen ? { open: true } : {}, el("summary", {}, "A load step was a mistake?"),
      el("p", { class: "muted" }, "A void step keeps its readings and stays in this list; it is left out of the void-ratio curve, Cc, Cr, σ′p and the stress before the next step."),
      ...(summaries.some((s) => !s.void) ? [form] : []), ...restores));
    if (O.readOnly) host.querySelectorAll("input, button, select").forEach((e) => (e.disabled = true));
  }

  // ---- actions ---------------------------------------------------------------------------------------------
  function field(name, label, attrs) {
    const id = "f-" + name;
    return el("div", { class: "field" }, el("label", { for: id }, label), el("input", Object.assign({ id, name }, attrs || {})), el("span", { class: "err", "data-err-for": name }));
  }

  // Sends a form's values and puts the daemon's message next to the field it names.
  async function submit(form, path, body) {
    const msg = form.querySelector("[data-role=msg]");
    form.querySelectorAll(".err").forEach((e) => (e.textContent = ""));
    form.querySelectorAll("[aria-invalid]").forEach((e) => e.removeAttribute("aria-invalid"));
    msg.textContent = ""; msg.className = "form-msg";
    const buttons = form.querySelectorAll("button"); buttons.forEach((b) => (b.disabled = true));
    const r = await api("POST", path, body);
    buttons.forEach((b) => (b.disabled = false));
    form.dataset.status = r.status;
    if (r.ok) { msg.textContent = "Done."; msg.classList.add("good"); O.refresh(); return r; }
    if (r.status === 403) markReadOnly();
    const text = O.errorText(r);
    const name = r.data && r.data.field ? String(r.data.field).split(".").pop() : null;
    const slot = name && form.querySelector('[data-err-for="' + name + '"]');
    if (slot) { slot.textContent = text; const input = form.querySelector('[name="' + name + '"]'); if (input) { input.setAttribute("aria-invalid", "true"); input.focus(); } }
    else { msg.textContent = text; msg.classList.add("bad"); }
    msg.dataset.status = r.status;
    return r;
  }

  const num = (form, name) => { const v = form.elements[name] && form.elements[name].value.trim(); return v === "" || v === undefined ? undefined : Number(v); };
  const base = () => "/api/frames/" + encodeURIComponent(frameId);
  const safety = () => el("div", { class: "safety", "data-role": "safety" },
    el("strong", {}, "oedolog never changes the load itself."),
    "A person puts the weights on the hanger. Support the beam while you change weights. Results are proposals for a qualified engineer.");

  function startForm() {
    const form = el("form", { class: "act", id: "start-form", novalidate: true },
      field("specimen", "Specimen reference", { required: true, autocomplete: "off" }),
      field("description", "Description", {}),
      el("div", { class: "row2" }, field("height_mm", "Height, " + O.unitName("length"), { inputmode: "decimal" }), field("diameter_mm", "Diameter, " + O.unitName("length"), { inputmode: "decimal" })),
      el("div", { class: "row2" }, field("dry_mass_g", "Dry mass, g", { inputmode: "decimal" }), field("specific_gravity", "Specific gravity Gs", { inputmode: "decimal" })),
      field("seating_kpa", "Seating stress, " + O.unitName("stress"), { inputmode: "decimal" }),
      el("button", { class: "btn", type: "submit" }, "Start the test"),
      el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("submit", (ev) => {
      ev.preventDefault();
      const body = { specimen: form.elements.specimen.value.trim() };
      if (form.elements.description.value.trim()) body.description = form.elements.description.value.trim();
      // Typed in the units shown; the API takes mm and kPa.
      const unitOf = { height_mm: "length", diameter_mm: "length", seating_kpa: "stress" };
      for (const k of ["height_mm", "diameter_mm", "dry_mass_g", "specific_gravity", "seating_kpa"]) { const v = num(form, k); if (v !== undefined) body[k] = unitOf[k] ? O.toStored(unitOf[k], v) : v; }
      submit(form, base() + "/tests", body);
    });
    return [el("h2", {}, "Start a test"), el("p", { class: "muted" }, "Fill in the specimen as built into the ring."), form];
  }

  function armForm() {
    const form = el("form", { class: "act", id: "arm-form", novalidate: true },
      el("div", { class: "choice", role: "radiogroup" },
        el("label", {}, el("input", { type: "radio", name: "by", value: "stress", checked: true }), " by stress"),
        el("label", {}, el("input", { type: "radio", name: "by", value: "mass" }), " by hanger mass")),
      el("div", { "data-by": "stress" }, field("stress_kpa", "Next stress, " + O.unitName("stress"), { inputmode: "decimal" })),
      el("div", { "data-by": "mass", hidden: true }, field("hanger_mass_kg", "Total hanger mass, kg", { inputmode: "decimal" })),
      safety(),
      el("button", { class: "btn", type: "submit" }, "Arm the next load"),
      el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("change", () => {
      const by = form.elements.by.value;
      form.querySelectorAll("[data-by]").forEach((d) => (d.hidden = d.dataset.by !== by));
    });
    form.addEventListener("submit", (ev) => {
      ev.preventDefault();
      const by = form.elements.by.value;
      const body = by === "stress" ? { stress_kpa: O.toStored("stress", num(form, "stress_kpa")) ?? null } : { hanger_mass_kg: num(form, "hanger_mass_kg") ?? null };
      submit(form, base() + "/increments", body);
    });
    return [el("h2", {}, "Arm the next load step"), el("p", { class: "muted" }, "Arming tells oedolog which load you are about to put on, so it can find the start of the step."), form];
  }

  function appliedForm(t) {
    const form = el("form", { class: "act", id: "applied-form" }, safety(),
      el("button", { class: "btn", type: "submit" }, "The weights are on — mark applied"),
      el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("submit", (ev) => { ev.preventDefault(); submit(form, base() + "/increments/current/applied", {}); });
    const withdraw = el("form", { class: "act", id: "withdraw-form" },
      el("button", { class: "btn quiet", type: "submit" }, "Wrong stress — withdraw step " + t.increment),
      el("span", { class: "form-msg", "data-role": "msg" }));
    withdraw.addEventListener("submit", (ev) => { ev.preventDefault(); submit(withdraw, base() + "/increments/current/withdraw", {}); });
    return [el("h2", {}, "Load step " + t.increment + " armed: " + O.qty("stress", t.stress_kpa)), el("p", {}, "Put the weights on now. oedolog also finds the start of the step from the load cell by itself."), form,
      el("p", { class: "muted" }, "Armed the wrong stress? Withdraw it before the load goes on, then arm the right one."), withdraw];
  }

  function reseatForm(r) {
    const form = el("form", { class: "act", id: "reseat-form" },
      el("p", {}, "The gauge reading jumped by " + O.len(r.jump_mm) + " at " + fmt.clock(r.at_us) + ". If the gauge was re-seated, accept so the curve continues across the jump."),
      el("div", { class: "row2" }, el("button", { class: "btn", type: "submit", value: "accept" }, "Yes, it was re-seated"), el("button", { class: "btn quiet", type: "submit", value: "reject" }, "No, keep the jump")),
      el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("submit", (ev) => { ev.preventDefault(); submit(form, base() + "/reseat", { accept: ev.submitter ? ev.submitter.value === "accept" : true }); });
    return [el("h2", {}, "Confirm a gauge re-seat"), form];
  }

  function finishForm(t) {
    const form = el("form", { class: "act", id: "finish-form" },
      el("button", { class: "btn quiet", type: "button", "data-role": "ask" }, "Finish this test…"),
      el("div", { hidden: true, "data-role": "confirm" }, el("p", {}, "Finish test " + t.specimen + "? Logging stops; the data stays."), el("button", { class: "btn warn", type: "submit" }, "Yes, finish " + t.specimen)),
      el("span", { class: "form-msg", "data-role": "msg" }));
    form.querySelector("[data-role=ask]").addEventListener("click", () => { form.querySelector("[data-role=confirm]").hidden = false; });
    form.addEventListener("submit", (ev) => { ev.preventDefault(); submit(form, base() + "/tests/current/finish", {}); });
    return [el("h3", {}, "End of the test"), form];
  }

  // /api/me says at load whether this account may act (a 403 later says the same); a viewer's action
  // forms are greyed out with the reason instead of inviting refused clicks.
  function markReadOnly() {
    if (O.readOnly) return;
    O.readOnly = true;
    document.body.dataset.readonly = "true";
    const host = document.getElementById("actions");
    host.querySelectorAll("input, button, textarea").forEach((e) => (e.disabled = true));
    document.querySelectorAll("#step-tools input, #step-tools button, #step-tools select").forEach((e) => (e.disabled = true));
    document.querySelectorAll("#frame-alarms [data-ack]").forEach((b) => b.remove());
    if (!host.querySelector("[data-role=readonly]")) host.prepend(el("p", { class: "form-msg bad", "data-role": "readonly" }, "This account may view only: actions are for an operator."));
  }

  function renderActions() {
    const t = frame.test, w = frame.watch || {};
    const key = [frame.state, t && t.test_id, t && t.increment, !!w.pending_reseat].join("/");
    if (key === actionKey) return;
    actionKey = key;
    const host = document.getElementById("actions");
    const parts = [];
    if (!t) parts.push(...startForm());
    else {
      if (w.pending_reseat) parts.push(...reseatForm(w.pending_reseat));
      if (t.state === "armed") parts.push(...appliedForm(t));
      else parts.push(...armForm());
      parts.push(...finishForm(t));
    }
    host.dataset.testId = t ? t.test_id : "";
    host.replaceChildren(...parts);
    if (O.readOnly) { O.readOnly = false; markReadOnly(); }
  }

  // A daemon alarm not yet acknowledged gets a button: an operator says someone is on it (the alarm stays
  // until its condition is gone).
  function alarmChip(a) {
    const chip = el("span", { class: "alarm " + a.code + (a.acknowledged ? " acked" : ""), "data-alarm": a.code, title: a.message || a.text }, a.text);
    // Only once /api/me has said this account may act: a viewer never sees the button, not even briefly.
    if (a.id && !a.acknowledged && O.mayAct === true && !O.readOnly) {
      const b = el("button", { class: "btn quiet ack", type: "button", "data-ack": a.id }, "Seen — I'm on it");
      b.addEventListener("click", async () => {
        b.disabled = true;
        const r = await api("POST", "/api/alarms/" + a.id + "/acknowledge", {});
        if (!r.ok) { b.disabled = false; b.title = O.errorText(r); if (r.status === 403) markReadOnly(); }
        else O.refresh && O.refresh();
      });
      chip.append(" ", b);
    }
    return chip;
  }

  // ---- header and facts -----------------------------------------------------------------------------------
  function renderHead() {
    const info = O.stateInfo(frame.state);
    document.title = "oedolog — " + frame.name;
    const head = document.getElementById("head");
    head.dataset.frameId = frame.id; head.dataset.state = frame.state;
    document.getElementById("frame-name").textContent = frame.name + " (" + frame.id + ")";
    document.getElementById("state-word").replaceChildren(el("span", { class: "glyph", "aria-hidden": "true" }, info.glyph), info.word);
    const eta = O.etaS(frame);
    document.getElementById("state-hint").textContent = frame.state === "ready" ? O.readyLine(frame) : frame.state === "primary" && eta !== null ? (eta > 0 ? "end of primary in ~" + fmt.span(eta) : "past the estimated end of primary — still settling") : info.hint;
    const alarms = O.alarms(frame);
    head.dataset.stale = alarms.some((a) => a.code === "stale") ? "true" : "false";
    const alarmKey = JSON.stringify(alarms.map((a) => [a.code, a.id, a.acknowledged]));
    const host = document.getElementById("frame-alarms");
    if (host.dataset.key !== alarmKey) {
      host.dataset.key = alarmKey;
      host.replaceChildren(...alarms.map(alarmChip));
      // The daemon's own words for each of its alarms, readable without hovering (phones).
      document.getElementById("alarm-notes").replaceChildren(...alarms.filter((a) => a.message).map((a) => el("li", { "data-alarm": a.code }, a.message)));
    }
    const t = frame.test, w = frame.watch || {};
    const facts = [
      ["Specimen", t ? t.specimen : "—"], ["Load step", t ? t.increment + " · " + O.qty("stress", t.stress_kpa) : "—"],
      ["Stress before this step", t && t.from_kpa != null ? O.qty("stress", t.from_kpa) : "—"], ["In this step", fmt.span(frame.increment_elapsed_s)],
      ["Gauge reading", O.len(frame.displacement_mm)], ["Load cell", fmt.num(frame.load_kn, 4) + " kN"],
      ["Temperature", fmt.num(frame.temperature_c, 1) + " °C"], ["Last reading", frame.reading_age_s == null ? "never" : fmt.span(frame.reading_age_s) + " ago"],
      ["t50 / t90", fmt.sig(w.t50_min, 3) + " / " + fmt.sig(w.t90_min, 3) + " min"],
    ];
    document.getElementById("now-facts").replaceChildren(...facts.flatMap(([k, v]) => [el("dt", {}, k), el("dd", {}, v)]));
    const link = document.getElementById("report-link");
    link.replaceChildren(t ? el("a", { href: "/tests/" + t.test_id + "/report", "data-role": "report", target: "_blank" }, "Printable report of test " + t.specimen) : "");
    const now = O.snapshotNowUs(frame);
    if (now) document.getElementById("clock").textContent = fmt.clock(now);
  }

  // ---- journal ----------------------------------------------------------------------------------------------
  function journalText(e) {
    if (typeof e === "string") return e;
    const who = e.actor ? " — " + e.actor : "";
    return (e.at ? String(e.at).replace("T", " ").slice(0, 16) + " " : "") + (e.message || e.text || e.kind || JSON.stringify(e)) + who;
  }
  const mine = (e) => !e || typeof e !== "object" || !e.frame || e.frame === frameId;
  function addJournal(entries) {
    const list = document.getElementById("journal");
    for (const e of entries.filter(mine)) list.prepend(el("li", {}, journalText(e)));
    while (list.children.length > 40) list.lastChild.remove();
  }
  async function loadJournal() {
    // The newest 60, newest first from the daemon; fed oldest first because each one goes on top.
    const r = await api("GET", "/api/events?order=newest&limit=60&frame=" + encodeURIComponent(frameId));
    const rows = r.ok ? (Array.isArray(r.data) ? r.data : r.data.events || []) : [];
    addJournal(rows.slice().reverse());
  }

  // ---- wiring -----------------------------------------------------------------------------------------------
  let lastKey = "", lastCurveAt = 0, lastCompAt = Date.now();
  function onFrames(frames) {
    const f = frames.find((x) => String(x.id) === frameId);
    if (!f) { document.getElementById("frame-name").textContent = "No frame " + frameId; return; }
    const first = !frame;
    frame = f; O.frame = f;
    renderHead(); renderActions();
    const t = f.test;
    // Without a test the plots would be empty frames: they are hidden behind a one-line note instead.
    const has = t ? "true" : "false";
    if (document.body.dataset.hasTest !== has) { document.body.dataset.hasTest = has; requestAnimationFrame(resizeCharts); }
    const key = [t && t.test_id, t && t.increment].join("/");
    if (key !== lastKey) {
      // A new test resets the view; a new step of the same test keeps an earlier step someone chose to
      // look at (the picker gains the new step; the page does not jump away from what is being read).
      const sameTest = t && lastKey.split("/")[0] === String(t.test_id);
      lastKey = key;
      if (!sameTest) selectedSeq = null;
      seqPicker();
      if (t) { if (selectedSeq === null) loadStep(t.increment); loadCompression(); } else { timeCharts({ t: [], d: [] }, null); compression = null; summaries = []; compressionChart(); renderTable(); }
    }
    else if (t && selectedSeq === null && Date.now() - lastCurveAt > 5000 && (f.state === "primary" || f.state === "ready" || f.state === "seating")) { lastCurveAt = Date.now(); loadStep(t.increment); }
    if (t && Date.now() - lastCompAt > 20000) { lastCompAt = Date.now(); loadCompression(); }
    if (first) loadJournal();
  }

  document.getElementById("comp-linear").addEventListener("change", compressionChart);
  document.getElementById("sqrt-whole").addEventListener("change", () => loadStep(selectedSeq ?? ((frame && frame.watch && frame.watch.seq) || (frame && frame.test && frame.test.increment))));
  document.getElementById("note-form").addEventListener("submit", async (ev) => {
    ev.preventDefault();
    const form = ev.target;
    const r = await submit(form, base() + "/notes", { text: form.elements.text.value });
    if (r.ok) form.elements.text.value = "";
  });
  function resizeCharts() { for (const u of Object.values(O.charts)) { const host = u.root.parentElement; if (host && host.clientWidth) u.setSize(chartSize(host)); } }
  let resizeTimer = 0;
  window.addEventListener("resize", () => { clearTimeout(resizeTimer); resizeTimer = setTimeout(resizeCharts, 150); });
  O.on("frames", onFrames);
  // A units change re-draws everything shown, forms included (their labels name the unit typed in).
  O.on("units", () => {
    if (!frame) return;
    actionKey = ""; stepToolsKey = null;
    renderHead(); renderActions();
    if (O.lastStep) timeCharts(O.lastStep.cols, O.lastStep.red);
    compressionChart(); renderTable();
  });
  O.on("journal", (j) => addJournal([j.entry]));
  api("GET", "/api/me").then((r) => {
    O.mayAct = !!(r.ok && r.data && r.data.may_act === true);
    if (r.ok && r.data && r.data.may_act === false) markReadOnly();
    // Draw the alarm chips again now that it is known whether they get an acknowledge button.
    document.getElementById("frame-alarms").dataset.key = "";
    if (frame) renderHead();
  });
  if (!frameId) document.getElementById("frame-name").textContent = "No frame chosen — go back to all frames";
  O.start();
})();
