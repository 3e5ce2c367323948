// oedolog dashboard, the engineer's review on a frame's page: where the review stands and the adjustments in
// force (everyone sees them), and, for a signed-in engineer, the tools: choose a load step's √t or log-t
// window by dragging across its readings (or type the times), set d0 / d100 / t50 / t90 or the drainage,
// choose the points of the e–log σ′ lines by clicking them (or ticking them), see the values recomputed by
// the daemon as a preview, then save with a reason; take an adjustment back; approve the test. The daemon
// does every computation; the page only shows what it answers. The automatic proposal is never lost.
(function () {
  "use strict";
  const O = window.oedolog;
  const { el, fmt, api } = O;
  // The daemon's words for each choice (daemon/src/http/words.rs CHOICE_WORDS; a test keeps them equal).
  const CHOICE_WORDS = {
    taylor_window_min: "√t straight-line window",
    primary_window_min: "log-t primary tangent window",
    secondary_window_min: "log-t secondary line window",
    d0_mm: "d0",
    d100_mm: "d100",
    t50_min: "t50",
    t90_min: "t90",
    drainage: "drainage",
    virgin_points_kpa: "virgin-line points (Cc)",
    unload_reload_points_kpa: "unload–reload points (Cr)",
    max_curvature_kpa: "point of greatest curvature (σ′p)",
    sigma_p_kpa: "σ′p set directly",
    sigma_v0_kpa: "σ′v0",
  };
  O.mayReview = false;
  O.chosenPoints = [];
  let key = "";
  let previewTimer = null;

  const summary = () => O.testReduction || null;
  const testId = () => summary() && summary().test && summary().test.id;
  const shownSeq = () => (O.step && O.step.seq) || null;
  const words = (fields) => (fields || []).map((f) => CHOICE_WORDS[f] || f).join(", ");

  function statusLine(review) {
    const a = review.approval;
    if (a) return el("p", { class: "review-approved", "data-approved-by": a.by }, "◆ Reviewed and approved by " + a.by + " on " + a.at.slice(0, 16).replace("T", " ") + " UTC" + (a.note ? " — " + a.note : ""));
    const last = (review.approvals || []).slice(-1)[0];
    if (last && last.withdrawn_at) return el("p", { class: "review-withdrawn" }, "The approval by " + last.by + " was withdrawn by revision " + last.withdrawn_by_revision + ": the values are not approved.");
    return el("p", { class: "muted" }, "Not yet reviewed: every value here is the daemon's proposal.");
  }

  // One revision in force, with what it set and who; an engineer may take it back.
  function revisionItem(v, s) {
    const scope = v.seq === null || v.seq === undefined ? "e–log σ′ curve" : "load step " + v.seq;
    const step = v.seq ? (s.increments || []).find((i) => i.seq === v.seq) : null;
    const fields = step ? step.adjusted : v.seq ? Object.keys(v.choices || {}) : s.review.compression_adjusted;
    const li = el("li", { "data-revision": v.id }, el("strong", {}, scope + ": " + words(fields)), " — " + v.by + ", " + v.at.slice(0, 16).replace("T", " ") + " UTC: " + v.reason);
    if (step && step.proposal) li.append(el("span", { class: "muted" }, " (proposal t90 " + fmt.sig(step.proposal.t90_min, 3) + " min, cv " + O.qty("cv", step.proposal.cv_mm2_per_min, 3) + ")"));
    if (!step && v.seq == null && s.review.compression_proposal) li.append(el("span", { class: "muted" }, " (proposal Cc " + fmt.num(s.review.compression_proposal.cc, 3) + ")"));
    if (O.mayReview) {
      const form = el("form", { class: "inline", "data-withdraw": v.id, novalidate: true },
        el("label", { for: "withdraw-" + v.id, class: "sr" }, "Why take it back"),
        el("input", { id: "withdraw-" + v.id, name: "reason", placeholder: "why take it back", required: true }),
        el("button", { class: "btn quiet", type: "submit" }, "Withdraw"), el("span", { class: "form-msg", "data-role": "msg" }));
      form.addEventListener("submit", async (ev) => {
        ev.preventDefault();
        const r = await api("POST", "/api/tests/" + testId() + "/revisions/" + v.id + "/withdraw", { reason: form.elements.reason.value.trim() });
        answer(form, r);
      });
      li.append(form);
    }
    return li;
  }

  // The daemon's answer beside the form: done (and everything reloaded), or its message by the field.
  function answer(form, r) {
    form.dataset.status = r.status;
    const msg = form.querySelector("[data-role=msg]");
    form.querySelectorAll(".err").forEach((e) => (e.textContent = ""));
    if (r.ok) { msg.textContent = "Saved."; msg.className = "form-msg good"; key = ""; O.reloadReview(); return; }
    const field = r.data && r.data.field ? String(r.data.field).split(".").pop() : null;
    const slot = field && form.querySelector('[data-err-for="' + field + '"]');
    (slot || msg).textContent = O.errorText(r);
    msg.className = "form-msg" + (slot ? "" : " bad");
  }

  const input = (name, label, attrs) => el("div", { class: "field" },
    el("label", { for: "rv-" + name }, label), el("input", Object.assign({ id: "rv-" + name, name, inputmode: "decimal" }, attrs || {})), el("span", { class: "err", "data-err-for": name }));
  const pair = (name, label) => el("div", { class: "field pair-field" },
    el("span", { class: "label", id: "rv-" + name + "-label" }, label),
    el("input", { id: "rv-" + name + "-from", name: name + "-from", inputmode: "decimal", "aria-labelledby": "rv-" + name + "-label", "aria-label": label + " from, min", placeholder: "from" }),
    el("input", { id: "rv-" + name + "-to", name: name + "-to", inputmode: "decimal", "aria-label": label + " to, min", placeholder: "to" }),
    el("span", { class: "err", "data-err-for": name }));

  // The step choices from the form (times in min, lengths in the chosen unit back to mm).
  function stepChoices(form) {
    const v = (n) => { const t = form.elements[n].value.trim(); return t === "" ? undefined : Number(t); };
    const c = {};
    for (const w of ["taylor_window_min", "primary_window_min", "secondary_window_min"]) {
      const a = v(w + "-from"), b = v(w + "-to");
      if (a !== undefined || b !== undefined) c[w] = [a ?? null, b ?? null];
    }
    for (const n of ["d0_mm", "d100_mm"]) if (v(n) !== undefined) c[n] = O.toStored("length", v(n));
    for (const n of ["t50_min", "t90_min"]) if (v(n) !== undefined) c[n] = v(n);
    if (form.elements.drainage.value) c.drainage = form.elements.drainage.value;
    return c;
  }

  function curveChoices(form) {
    const ticked = (name) => [...form.querySelectorAll('input[name="' + name + '"]:checked')].map((b) => Number(b.value));
    const v = (n) => { const t = form.elements[n].value.trim(); return t === "" ? undefined : O.toStored("stress", Number(t)); };
    const c = {};
    const virgin = ticked("virgin"), cycle = ticked("cycle");
    if (virgin.length) c.virgin_points_kpa = virgin;
    if (cycle.length) c.unload_reload_points_kpa = cycle;
    for (const n of ["max_curvature_kpa", "sigma_p_kpa", "sigma_v0_kpa"]) if (v(n) !== undefined) c[n] = v(n);
    return c;
  }

  // Asks the daemon what the choices give, and draws it; nothing is stored.
  async function preview(form, scope) {
    const out = form.querySelector("[data-role=preview]");
    const choices = scope === "step" ? stepChoices(form) : curveChoices(form);
    form.querySelectorAll(".err").forEach((e) => (e.textContent = ""));
    if (!Object.keys(choices).length) {
      out.textContent = "Nothing chosen: the proposal stands.";
      if (scope === "step") O.drawStep(O.lastStep && O.analysis[shownSeq()]); else O.drawCompression(summary().compression);
      return;
    }
    const body = scope === "step" ? { seq: shownSeq(), choices } : { choices };
    const r = await api("POST", "/api/tests/" + testId() + "/preview", body);
    form.dataset.preview = r.status;
    if (!r.ok) {
      const field = r.data && r.data.field ? String(r.data.field).split(".").pop() : null;
      const slot = field && form.querySelector('[data-err-for="' + field + '"]');
      (slot || out).textContent = O.errorText(r);
      if (slot) out.textContent = "";
      return;
    }
    const d = r.data;
    O.preview = d;
    if (scope === "step") {
      O.drawStep(d.reduction);
      const p = d.proposal || {}, n = d.values || {};
      out.textContent = "Preview (" + words(d.adjusted) + "): t50 " + fmt.sig(n.t50_min, 3) + " min (proposal " + fmt.sig(p.t50_min, 3) + ") · t90 " + fmt.sig(n.t90_min, 3) + " min (proposal " + fmt.sig(p.t90_min, 3) + ") · cv(√t) " + O.qty("cv", n.cv_taylor_mm2_per_min, 3) + " (proposal " + O.qty("cv", p.cv_taylor_mm2_per_min, 3) + ") · cv(log t) " + O.qty("cv", n.cv_casagrande_mm2_per_min, 3);
    } else {
      O.drawCompression(d.compression);
      const p = d.proposal || {}, n = d.values || {};
      out.textContent = "Preview (" + words(d.adjusted) + "): Cc " + fmt.num(n.cc, 3) + " (proposal " + fmt.num(p.cc, 3) + ") · Cr " + fmt.num(n.cr, 3) + " (proposal " + fmt.num(p.cr, 3) + ") · σ′p " + O.qty("stress", n.sigma_p_chosen_kpa ?? n.sigma_p_casagrande_kpa, 3) + " (proposal " + O.qty("stress", p.sigma_p_casagrande_kpa, 3) + ")";
    }
    out.dataset.values = JSON.stringify(d.values);
  }
  const later = (form, scope) => { clearTimeout(previewTimer); previewTimer = setTimeout(() => preview(form, scope), 350); };

  async function save(form, scope) {
    const choices = scope === "step" ? stepChoices(form) : curveChoices(form);
    const body = { choices, reason: form.elements.reason.value.trim() };
    if (scope === "step") body.seq = shownSeq();
    answer(form, await api("POST", "/api/tests/" + testId() + "/revisions", body));
  }

  function stepForm() {
    const seq = shownSeq();
    const form = el("form", { id: "step-review-form", novalidate: true },
      el("h3", {}, "Load step " + seq + ": the time-curve constructions"),
      el("p", { class: "hint" }, "Drag across the readings on the √t chart to choose its straight part; on the log-t chart to choose the window picked here:",
        el("label", {}, el("input", { type: "radio", name: "logt-window", value: "primary_window_min", checked: true }), " primary tangent"),
        el("label", {}, el("input", { type: "radio", name: "logt-window", value: "secondary_window_min" }), " secondary line"),
        ". Or type the times."),
      pair("taylor_window_min", "√t straight part, min"), pair("primary_window_min", "log-t primary tangent, min"), pair("secondary_window_min", "log-t secondary line, min"),
      el("div", { class: "row2" }, input("d0_mm", "d0, " + O.unitName("length")), input("d100_mm", "d100, " + O.unitName("length"))),
      el("div", { class: "row2" }, input("t50_min", "t50, min"), input("t90_min", "t90, min")),
      el("div", { class: "field" }, el("label", { for: "rv-drainage" }, "Drainage"),
        el("select", { id: "rv-drainage", name: "drainage" }, el("option", { value: "" }, "as proposed (double)"), el("option", { value: "double" }, "double (top and bottom)"), el("option", { value: "single" }, "single (one face)")),
        el("span", { class: "err", "data-err-for": "drainage" })),
      el("p", { class: "preview", "data-role": "preview", "aria-live": "polite" }),
      el("div", { class: "field" }, el("label", { for: "rv-step-reason" }, "Why (goes in the journal and the report)"), el("textarea", { id: "rv-step-reason", name: "reason", rows: 2 }), el("span", { class: "err", "data-err-for": "reason" })),
      el("button", { class: "btn", type: "submit" }, "Save adjustment"), el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("input", (ev) => { if (ev.target.name !== "reason") later(form, "step"); });
    form.addEventListener("submit", (ev) => { ev.preventDefault(); save(form, "step"); });
    return form;
  }

  function curveForm(s) {
    const pts = (s.compression && s.compression.points) || [];
    const SF = O.units.stress.per_stored, su = O.unitName("stress");
    const box = (name, i, p) => el("label", { class: "tick" }, el("input", { type: "checkbox", name, value: p.stress_kpa, "data-point": i }), " " + fmt.sig(p.stress_kpa * SF, 4));
    const loading = pts.map((p, i) => [p, i]).filter(([p]) => p.branch === "loading");
    const cycle = pts.map((p, i) => [p, i]).filter(([p, i]) => p.branch !== "loading" || (pts[i + 1] && pts[i + 1].branch === "unloading"));
    const form = el("form", { id: "curve-review-form", novalidate: true },
      el("h3", {}, "The e–log σ′ constructions"),
      el("p", { class: "hint" }, "Click points on the e–log σ′ chart to add them to the virgin line or take them off, or tick them here (σ′ in " + su + ")."),
      el("fieldset", {}, el("legend", {}, "Virgin-line points (Cc)"), ...loading.map(([p, i]) => box("virgin", i, p)), el("span", { class: "err", "data-err-for": "virgin_points_kpa" })),
      cycle.length ? el("fieldset", {}, el("legend", {}, "Unload–reload points (Cr)"), ...cycle.map(([p, i]) => box("cycle", i, p)), el("span", { class: "err", "data-err-for": "unload_reload_points_kpa" })) : null,
      el("div", { class: "row2" }, input("max_curvature_kpa", "Greatest curvature at σ′, " + su), input("sigma_p_kpa", "σ′p set directly, " + su)),
      input("sigma_v0_kpa", "σ′v0 (in situ), " + su),
      el("p", { class: "preview", "data-role": "preview", "aria-live": "polite" }),
      el("div", { class: "field" }, el("label", { for: "rv-curve-reason" }, "Why (goes in the journal and the report)"), el("textarea", { id: "rv-curve-reason", name: "reason", rows: 2 }), el("span", { class: "err", "data-err-for": "reason" })),
      el("button", { class: "btn", type: "submit" }, "Save adjustment"), el("span", { class: "form-msg", "data-role": "msg" }));
    const ringed = () => { O.chosenPoints = [...form.querySelectorAll('input[name="virgin"]:checked')].map((b) => Number(b.dataset.point)); };
    form.addEventListener("input", (ev) => { if (ev.target.name !== "reason") { ringed(); later(form, "curve"); } });
    form.addEventListener("submit", (ev) => { ev.preventDefault(); save(form, "curve"); });
    return form;
  }

  function approveForm(s) {
    const form = el("form", { id: "approve-form", novalidate: true },
      el("h3", {}, "Approve this test"),
      el("p", { class: "hint" }, "Approving freezes the values as they stand, with the adjustments listed; a later adjustment withdraws the approval. Results remain subject to the governing standard and local codes."),
      el("div", { class: "field" }, el("label", { for: "rv-note" }, "Note (optional)"), el("textarea", { id: "rv-note", name: "note", rows: 2 }), el("span", { class: "err", "data-err-for": "note" })),
      el("button", { class: "btn", type: "submit", disabled: !!s.review.approval }, s.review.approval ? "Approved" : "Approve"), el("span", { class: "form-msg", "data-role": "msg" }));
    form.addEventListener("submit", async (ev) => { ev.preventDefault(); answer(form, await api("POST", "/api/tests/" + testId() + "/approve", { note: form.elements.note.value.trim() })); });
    return form;
  }

  // A drag on a time chart fills the window it chose, then previews.
  O.onChartWindow = (chart, a, b) => {
    const form = document.getElementById("step-review-form");
    if (!form) return;
    const w = chart === "sqrt" ? "taylor_window_min" : form.querySelector('input[name="logt-window"]:checked').value;
    form.elements[w + "-from"].value = fmt.sig(a, 4);
    form.elements[w + "-to"].value = fmt.sig(b, 4);
    preview(form, "step");
  };
  // A click on the e–log σ′ chart ticks or unticks that loading point.
  O.onPointClick = (i) => {
    const form = document.getElementById("curve-review-form");
    const b = form && form.querySelector('input[name="virgin"][data-point="' + i + '"]');
    if (!b) return;
    b.checked = !b.checked;
    O.chosenPoints = [...form.querySelectorAll('input[name="virgin"]:checked')].map((x) => Number(x.dataset.point));
    preview(form, "curve");
  };

  O.renderReview = function () {
    const host = document.getElementById("review-panel");
    const s = summary();
    if (!host) return;
    if (!s || !s.review) { host.hidden = true; return; }
    const k = JSON.stringify([s.review, shownSeq(), O.mayReview, O.units, (s.compression || {}).points && s.compression.points.length]);
    if (k === key) return;
    key = k;
    host.hidden = false;
    const inForce = (s.review.revisions || []).filter((v) => v.in_force);
    const parts = [el("h2", {}, "Engineer's review"), statusLine(s.review)];
    parts.push(inForce.length ? el("ul", { class: "revisions", id: "review-list" }, ...inForce.map((v) => revisionItem(v, s))) : el("p", { class: "muted", id: "review-list" }, "No adjustments: the constructions stand as the daemon proposed them."));
    if (O.mayReview) {
      const tools = [];
      if (shownSeq()) tools.push(stepForm());
      if (s.compression) tools.push(curveForm(s));
      tools.push(approveForm(s));
      parts.push(el("div", { class: "review-tools", id: "review-tools" }, ...tools));
    } else {
      parts.push(el("p", { class: "muted" }, "Adjusting a construction or approving the test needs a signed-in engineer."));
    }
    parts.push(el("p", { class: "caution" }, "Values are proposals until an engineer approves them; an approval does not replace the governing standard or local codes."));
    O.chosenPoints = [];
    host.replaceChildren(...parts);
  };

  api("GET", "/api/me").then((r) => {
    O.mayReview = !!(r.ok && r.data && r.data.may_review === true);
    key = "";
    O.renderReview();
  });
})();
