// curvewatch dashboard: one model's page.
"use strict";

(function () {
  const name = document.body.dataset.model;
  const api = "/api/v1";
  const base = api + "/models/" + encodeURIComponent(name);
  const $ = (id) => document.getElementById(id);
  const page = { model: null, fitsNext: null };

  // section runs one part of the drawing; a failure there is shown in
  // place and recorded, and the other parts still draw.
  function section(where, fn) {
    try {
      fn();
    } catch (e) {
      window.cwErrors.push(where + ": " + e.message);
      document.body.dataset.errors = String(window.cwErrors.length);
      const box = $(where);
      if (box) box.append(cw.el("p", { class: "notice bad" }, "This part could not be drawn: " + e.message));
    }
  }

  function notice(text, kind) {
    $("notices").append(cw.el("p", { class: "notice " + (kind || "") }, text));
  }

  function fact(dl, term, ...desc) {
    dl.append(cw.el("div", null, cw.el("dt", null, term), cw.el("dd", null, ...desc)));
  }

  // ---- header, facts and settings ----

  function header(m) {
    const chip = cw.clear($("state-chip"));
    chip.append(cw.chip(m.state));
    $("state-text").textContent = m.state_text;
    document.body.dataset.modelState = m.state;
    const dl = cw.clear($("facts"));
    const lr = m.last_refit;
    fact(dl, "Last refit", lr ? [cw.time(lr.finished), " · fit " + lr.id + " ", lr.status !== "succeeded" ? cw.el("span", { class: "tag tag-bad" }, lr.status) : ""] : "never");
    fact(dl, "Last success", m.last_success ? [cw.time(m.last_success.finished), " · fit " + m.last_success.id] : "never");
    fact(dl, "Deviance explained", cw.pct(m.deviance_explained));
    fact(dl, "Compared against", m.against === "baseline"
      ? (m.baseline_fit_id ? "baseline · fit " + m.baseline_fit_id : "baseline (none pinned yet)")
      : "the previous fit");
    const c = m.latest_comparison;
    fact(dl, "Worst shift score", c ? [cw.el("span", { class: "score" + (c.worst_score > 1 ? " over" : "") }, cw.score(c.worst_score)),
      c.worst_term ? " · " + c.worst_term : ""] : "–");
    fact(dl, "Firing alerts", String(m.firing_alerts.length) + (m.alerts_pending ? " (" + m.alerts_pending + " pending)" : ""));
    $("bar-status").textContent = m.writable ? "writes allowed" : "read-only";
  }

  function settings(m) {
    const dl = cw.clear($("config"));
    const c = m.config;
    fact(dl, "Schedule", cw.el("code", null, c.schedule));
    fact(dl, "Source table", cw.el("code", null, c.table));
    fact(dl, "Window", c.window);
    fact(dl, "Compared against", c.against);
    fact(dl, "Practical shift", cw.fmt(c.watch.practical_shift) + " (link scale)");
    fact(dl, "Band level", cw.pct(c.watch.level).replace(".0%", "%") + " simultaneous");
    fact(dl, "Deviance increase", "+" + cw.pct(c.watch.deviance_increase).replace(".0%", "%"));
    fact(dl, "Confirm runs", c.watch.confirm_runs === null ? "–" : String(c.watch.confirm_runs));
    fact(dl, "Max data age", c.max_age_seconds === null ? "off" : cw.fmt(c.max_age_seconds / 3600) + " h");
  }

  // ---- curves ----

  function spans(outside) {
    return (outside || []).map(([a, b]) => "between " + cw.fmt(a) + " and " + cw.fmt(b)).join(" and ");
  }

  // curveVerdict says a compared curve's verdict in words.
  function curveVerdict(ts, level, margin) {
    const pct = Math.round(level * 1000) / 10 + "%";
    const g = ts.grid;
    let excess = 0;
    if (g) {
      for (let i = 0; i < g.delta.length; i++) excess = Math.max(excess, Math.abs(g.delta[i]) - ts.critical * g.se[i]);
    }
    const where = spans(ts.outside);
    const leaves = "the new curve leaves the " + pct + " band" + (where ? " " + where : "") + " by up to " + cw.fmt(excess, 2);
    switch (ts.verdict) {
      case "shifted":
        return ["shifted", leaves + "; its largest shift, " + cw.fmt(ts.size, 2) + ", exceeds the practical margin of " + cw.fmt(margin) + "."];
      case "real but small":
        return ["small", leaves + ", but moves at most " + cw.fmt(ts.size, 2) + ", within the practical margin of " + cw.fmt(margin) + "."];
      case "stable":
        return ["steady", "the new curve stays inside the " + pct + " band (shift score " + cw.score(ts.score) + "; 1 is the band's edge)."];
    }
    return ["none", "not compared" + (ts.note ? ": " + ts.note : "; the comparison's warnings say why") + "."];
  }

  function verdictLine(term, kind, text) {
    const word = { shifted: "shifted", small: "real but small", steady: "steady", none: "not compared", alone: "fitted" }[kind];
    return cw.el("p", { class: "verdict verdict-" + kind }, cw.el("strong", null, term + ": " + word), " — " + text);
  }

  // effectLabel names the curves' y axis.
  function effectLabel(fitAns) {
    const f = fitAns && fitAns.figures;
    if (!f || !f.response) return "effect (link scale)";
    return f.link === "identity" ? "effect on " + f.response : "effect on " + f.response + " (" + f.link + " scale)";
  }

  function curveCard(ts, refC, curC, rep) {
    const card = cw.el("figure", { class: "card", "data-term": ts ? ts.name : curC.name });
    const title = ts ? ts.name : curC.name;
    const col = (curC && curC.columns[0]) || (refC && refC.columns[0]) || title;
    card.append(cw.el("figcaption", null, cw.el("h3", null, title),
      cw.el("span", { class: "muted small" }, curC && curC.edf !== null ? "edf " + cw.fmt(curC.edf, 3) : "")));
    const density = curC && curC.grid && curC.grid.density ? { x: curC.grid.density_x || curC.grid.x, counts: curC.grid.density } : null;
    const ranges = [];
    if (refC && refC.range) ranges.push({ lo: refC.range[0], hi: refC.range[1], cls: "range-ref", label: "reference fit's data" });
    if (curC && curC.range) ranges.push({ lo: curC.range[0], hi: curC.range[1], cls: "range-cur", label: "current fit's data" });
    if (ts && ts.grid) {
      const g = ts.grid;
      const c = ts.critical;
      const [kind, text] = curveVerdict(ts, rep.tolerance.level, rep.tolerance.practical_shift);
      card.append(verdictLine(ts.name, kind, text));
      card.append(charts.curve({
        term: ts.name, xLabel: col, yLabel: page.yLabel, x: g.x,
        label: ts.name + ": reference and current curve; " + text,
        bands: [{ lo: g.reference.map((r, i) => r - c * g.se[i]), hi: g.reference.map((r, i) => r + c * g.se[i]), cls: "band-ref" }],
        lines: [{ y: g.reference, cls: "series-ref" }, { y: g.candidate, cls: "series-cur" }],
        outside: ts.outside || [],
        diff: { y: g.delta, lo: g.se.map((s) => -c * s), hi: g.se.map((s) => c * s), margin: rep.tolerance.practical_shift },
        density, ranges,
      }));
    } else if (curC && curC.grid) {
      const g = curC.grid;
      if (ts) card.append(verdictLine(ts.name, "none", curveVerdict(ts, rep.tolerance.level, rep.tolerance.practical_shift)[1]));
      else card.append(verdictLine(curC.name, "alone", "fit " + page.current + " alone, with its 95% pointwise band; no comparison yet."));
      card.append(charts.curve({
        term: curC.name, xLabel: col, yLabel: page.yLabel, x: g.x,
        label: curC.name + ": the current curve with its 95% band",
        bands: [{ lo: g.fit.map((f, i) => f - 1.96 * g.se[i]), hi: g.fit.map((f, i) => f + 1.96 * g.se[i]), cls: "band-cur" }],
        lines: [{ y: g.fit, cls: "series-cur" }], outside: [], diff: null, density, ranges: ranges.slice(-1),
      }));
    } else {
      card.append(cw.el("p", { class: "muted" }, "No grid to draw."));
    }
    return card;
  }

  function legend(box, items) {
    cw.clear(box);
    for (const [cls, text] of items) box.append(cw.el("span", { class: "key" }, cw.el("span", { class: "swatch " + cls }), text));
  }

  function curves(comp, ref, cur) {
    const box = cw.clear($("curves"));
    const drawn = [];
    const rep = comp ? comp.report : null;
    page.yLabel = effectLabel(cur);
    const byName = (list, n) => (list || []).find((t) => t.name === n) || null;
    if (rep) {
      const level = Math.round(rep.tolerance.level * 1000) / 10 + "%";
      $("curves-caption").textContent = "Fit " + comp.candidate_fit_id + " (current) against fit " + comp.reference_fit_id +
        " (reference), both re-centred over the range both had data in. The shaded band is the reference ± the " + level +
        " simultaneous band of the difference: where the current curve leaves it (orange), the shift is real. The lower panel shows the difference with the same band and, dotted, the practical margin ±" +
        cw.fmt(rep.tolerance.practical_shift) + ".";
      legend($("curves-legend"), [["sw-ref", "reference fit " + comp.reference_fit_id], ["sw-cur", "current fit " + comp.candidate_fit_id],
        ["sw-band", level + " band"], ["sw-out", "outside the band"], ["sw-margin", "practical margin"]]);
      for (const ts of rep.terms.filter((t) => t.kind === "curve")) {
        box.append(curveCard(ts, byName(ref && ref.curves, ts.name), byName(cur && cur.curves, ts.name), rep));
        drawn.push(ts.name);
      }
    } else if (cur) {
      $("curves-caption").textContent = "Fit " + cur.id + " with 95% pointwise bands (fit ± 1.96 se, link scale). There is no comparison yet: it appears after the next refit is compared with a reference.";
      legend($("curves-legend"), [["sw-cur", "fit " + cur.id], ["sw-band-cur", "95% band"]]);
      for (const c of cur.curves) {
        box.append(curveCard(null, null, c, null));
        drawn.push(c.name);
      }
    }
    box.dataset.terms = drawn.join(",");
    $("sec-curves").hidden = drawn.length === 0;
  }

  // ---- surfaces ----

  function maxAbs(z, mask) {
    let m = 0;
    (z || []).forEach((row, i) => row.forEach((v, j) => {
      if (!(mask && mask[i] && mask[i][j]) && isFinite(v)) m = Math.max(m, Math.abs(v));
    }));
    return m;
  }

  function surfaces(comp, ref, cur) {
    const box = cw.clear($("surfaces"));
    const rep = comp ? comp.report : null;
    let n = 0;
    for (const s of (cur && cur.surfaces) || []) {
      const ts = rep ? rep.terms.find((t) => t.name === s.name) : null;
      const rs = ref ? ref.surfaces.find((t) => t.name === s.name) : null;
      const [c1, c2] = s.columns;
      const wrap = cw.el("figure", { class: "card surface-card", "data-term": s.name });
      wrap.append(cw.el("figcaption", null, cw.el("h3", null, s.name), cw.el("span", { class: "muted small" }, s.edf !== null ? "edf " + cw.fmt(s.edf, 3) : "")));
      if (ts) {
        const pct = Math.round(rep.tolerance.level * 1000) / 10 + "%";
        const kind = { shifted: "shifted", "real but small": "small", stable: "steady" }[ts.verdict] || "none";
        wrap.append(verdictLine(s.name, kind, cw.fmt(100 * ts.outside_fraction, 2) + "% of the common rectangle lies outside the " + pct +
          " band; the largest shift is " + cw.fmt(ts.size, 2) + " (practical margin " + cw.fmt(rep.tolerance.practical_shift) + ")."));
      }
      const row = cw.el("div", { class: "maps" });
      const vmax = Math.max(maxAbs(s.fit, s.far), rs ? maxAbs(rs.fit, rs.far) : 0);
      if (rs) row.append(charts.heatmap({ title: "reference · fit " + ref.id, x1: rs.x1, x2: rs.x2, z: rs.fit, mask: rs.far, vmax, xLabel: c1, yLabel: c2 }));
      row.append(charts.heatmap({ title: (rs ? "current · fit " : "fit ") + cur.id, x1: s.x1, x2: s.x2, z: s.fit, mask: s.far, vmax, xLabel: c1, yLabel: c2 }));
      if (ts && ts.surface) {
        const d = ts.surface;
        const mark = d.delta.map((r, i) => r.map((v, j) => !d.excluded[i][j] && d.se[i][j] > 0 && Math.abs(v) / d.se[i][j] > ts.critical));
        row.append(charts.heatmap({ title: "difference (current − reference)", x1: d.x1, x2: d.x2, z: d.delta, mask: d.excluded, mark,
          vmax: maxAbs(d.delta, d.excluded), xLabel: c1, yLabel: c2 }));
      }
      wrap.append(row);
      box.append(wrap);
      n++;
    }
    $("surfaces-caption").textContent = rep
      ? "Each surface on the link scale, reference and current on one colour scale; grey cells are far from the data (extrapolation). In the difference, outlined cells are outside the simultaneous band."
      : "Each surface on the link scale; grey cells are far from the data (extrapolation).";
    $("sec-surfaces").hidden = n === 0;
  }

  // ---- linear and factor terms ----

  function est(iv, cls, label, shape) {
    return { est: iv.estimate, lo: iv.lower, hi: iv.upper, cls, shape,
      title: label + ": " + cw.fmt(iv.estimate) + " (95% " + cw.fmt(iv.lower) + " to " + cw.fmt(iv.upper) + ")" };
  }

  function coefficients(comp, ref, cur) {
    const box = cw.clear($("coefs"));
    const rep = comp ? comp.report : null;
    let n = 0;
    const termVerdict = (nm) => {
      const ts = rep ? rep.terms.find((t) => t.name === nm) : null;
      if (!ts) return null;
      const kind = { shifted: "shifted", "real but small": "small", stable: "steady" }[ts.verdict] || "none";
      const text = kind === "none" ? "not compared" + (ts.note ? ": " + ts.note : "") + "."
        : "shift score " + cw.score(ts.score) + ", largest shift " + cw.fmt(ts.size, 2) + " (adjusted p " + cw.fmt(ts.p_adjusted, 2) + ").";
      return verdictLine(nm, kind, text);
    };
    for (const l of (cur && cur.linear) || []) {
      const r = ref ? ref.linear.find((t) => t.name === l.name) : null;
      const items = [];
      if (r) items.push(est(r, "est-ref", "reference fit " + ref.id, "square"));
      items.push(est(l, "est-cur", "current fit " + cur.id));
      const card = cw.el("figure", { class: "card", "data-term": l.name }, cw.el("figcaption", null, cw.el("h3", null, l.name),
        cw.el("span", { class: "muted small" }, "slope per unit of " + l.column)));
      const v = termVerdict(l.name);
      if (v) card.append(v);
      card.append(charts.intervals({ rows: [{ label: l.column, items }], zero: true, label: l.name + " slope with 95% intervals" }));
      box.append(card);
      n++;
    }
    for (const f of (cur && cur.factors) || []) {
      const r = ref ? ref.factors.find((t) => t.name === f.name) : null;
      const levels = [...new Set([...(r ? r.levels.map((x) => x.level) : []), ...f.levels.map((x) => x.level)])].sort();
      const rows = levels.map((lv) => {
        const items = [];
        const a = r ? r.levels.find((x) => x.level === lv) : null;
        const b = f.levels.find((x) => x.level === lv);
        if (a) items.push(est(a, "est-ref", "reference fit " + ref.id, "square"));
        if (b) items.push(est(b, "est-cur", "current fit " + cur.id));
        return { label: lv + ((b && b.reference) || (a && a.reference) ? " (ref.)" : ""), items };
      });
      const card = cw.el("figure", { class: "card", "data-term": f.name }, cw.el("figcaption", null, cw.el("h3", null, f.name),
        cw.el("span", { class: "muted small" }, f.shrunk ? "levels shrunk towards 0" : "difference from level " + (f.reference || "–"))));
      const v = termVerdict(f.name);
      if (v) card.append(v);
      card.append(charts.intervals({ rows, zero: true, label: f.name + " levels with 95% intervals" }));
      box.append(card);
      n++;
    }
    if (ref) legend($("coefs-legend"), [["sw-est-ref", "reference fit " + ref.id], ["sw-est-cur", "current fit " + cur.id]]);
    else cw.clear($("coefs-legend"));
    $("coefs-caption").textContent = "Estimates on the link scale with 95% intervals (estimate ± 1.96 se).";
    $("sec-coefs").hidden = n === 0;
  }

  // ---- history ----

  function historyCharts(h) {
    const t = (p) => Date.parse(p.finished);
    const series = h.terms.map((term, k) => ({
      name: term, color: charts.palette[k % charts.palette.length],
      pts: h.points.filter((p) => p.scores[term] !== undefined && p.scores[term] !== null).map((p) => ({
        t: t(p), v: p.scores[term], hot: p.scores[term] > 1,
        title: "fit " + p.fit_id + " · " + cw.when(p.finished) + " · " + term + ": " + cw.score(p.scores[term]) }),
      ),
    }));
    const fails = h.points.filter((p) => p.status === "failed").map((p) => ({ t: t(p), title: "fit " + p.fit_id + " failed · " + cw.when(p.finished) }));
    const fig1 = cw.clear($("score-history"));
    fig1.append(cw.el("figcaption", null, cw.el("h3", null, "Shift score by term"),
      cw.el("span", { class: "muted small" }, "1 = the band's edge; × marks a failed refit")));
    fig1.append(charts.lines({ series, ref: 1, refLabel: "band edge", yMin: 0, yLabel: "shift score", marks: fails,
      label: "Shift scores of each term over time", empty: "No comparison yet." }));
    const keys = cw.el("div", { class: "legend" });
    for (const s of series) keys.append(cw.el("span", { class: "key" }, cw.svg("svg", { class: "line-key", viewBox: "0 0 18 8", width: 18, height: 8, "aria-hidden": "true" },
      cw.svg("line", { x1: 0, x2: 18, y1: 4, y2: 4, stroke: s.color, "stroke-width": 2.5 })), s.name));
    fig1.append(keys);
    const devPts = h.points.filter((p) => p.deviance_explained !== null).map((p) => ({
      t: t(p), v: p.deviance_explained, title: "fit " + p.fit_id + " · " + cw.when(p.finished) + " · " + cw.pct(p.deviance_explained) }));
    const fig2 = cw.clear($("dev-history"));
    fig2.append(cw.el("figcaption", null, cw.el("h3", null, "Deviance explained"),
      cw.el("span", { class: "muted small" }, h.points.length + (h.points.length === 1 ? " refit" : " refits"))));
    fig2.append(charts.lines({ series: [{ name: "deviance explained", color: "#2563a8", pts: devPts }], ref: null, yLabel: "deviance explained",
      yFmt: (v, step) => (100 * v).toFixed(Math.max(0, Math.ceil(-Math.log10(step * 100) - 1e-9))) + "%", clamp: [0, 1], marks: fails, label: "Deviance explained over time", empty: "No successful refit yet." }));
    $("sec-history").hidden = devPts.length === 0;
  }

  // ---- alerts ----

  function alertsTable(list) {
    const box = cw.clear($("alerts"));
    if (!list.length) {
      box.append(cw.el("p", { class: "muted" }, "No alerts have been raised for this model."));
      return;
    }
    const tb = cw.el("tbody");
    for (const a of list) {
      tb.append(cw.el("tr", { "data-state": a.state },
        cw.el("td", null, cw.alertChip(a.state)),
        cw.el("td", null, cw.kind(a.kind), cw.el("div", { class: "sub" }, a.severity)),
        cw.el("td", null, a.term || cw.el("span", { class: "muted" }, "whole model")),
        cw.el("td", null, cw.time(a.firing_since && a.state === "firing" ? a.firing_since : a.since)),
        cw.el("td", { class: "num" }, String(a.consecutive)),
        cw.el("td", { class: "summary" }, a.summary || "–")));
    }
    box.append(cw.el("div", { class: "table-wrap" }, cw.el("table", { class: "alerts" },
      cw.el("thead", null, cw.el("tr", null, ["State", "Kind", "Term", "Since", "Runs", "Summary"].map((h, i) => cw.el("th", { scope: "col", class: i === 4 ? "num" : null }, h)))),
      tb)));
  }

  function eventsList(ev) {
    const box = cw.clear($("alert-events"));
    if (!ev.events.length) {
      box.append(cw.el("p", { class: "muted" }, "No changes yet."));
      return;
    }
    const ol = cw.el("ol", { class: "events" });
    for (const e of ev.events) {
      ol.append(cw.el("li", null, cw.el("span", { class: "ev-when" }, cw.when(e.at)), " ", cw.alertChip(e.state), " ",
        cw.el("strong", null, cw.kind(e.kind) + (e.term ? " · " + e.term : "")), " ", cw.el("span", { class: "ev-sum" }, e.summary),
        e.fit_id ? cw.el("span", { class: "sub-inline" }, " fit " + e.fit_id) : ""));
    }
    box.append(ol);
  }

  // ---- refits and pinning ----

  const tokenKey = "curvewatch-api-token";

  function pinBox(m) {
    const box = cw.clear($("pin-box"));
    box.hidden = !m.writable;
    if (!m.writable) return;
    const input = cw.el("input", { type: "password", id: "api-token", autocomplete: "off", spellcheck: "false" });
    input.value = sessionStorage.getItem(tokenKey) || "";
    box.append(cw.el("form", { class: "pin-box", onsubmit: (e) => e.preventDefault() },
      cw.el("label", null, "API token ", input),
      cw.el("span", { class: "muted small" }, "Needed to pin a fit as the baseline; kept in this tab only."),
      cw.el("p", { id: "pin-msg", class: "pin-msg", role: "status" })));
  }

  async function pin(id) {
    const input = $("api-token");
    const msg = $("pin-msg");
    const token = input ? input.value.trim() : "";
    if (!token) {
      msg.textContent = "Enter the API token first.";
      msg.className = "pin-msg bad";
      return;
    }
    if (!window.confirm("Pin fit " + id + " as the baseline of " + name + "? Later refits will be compared with it.")) return;
    try {
      const res = await cw.get(base + "/baseline", {
        method: "POST",
        headers: { Accept: "application/json", "Content-Type": "application/json", Authorization: "Bearer " + token },
        body: JSON.stringify({ fit_id: id }),
      });
      sessionStorage.setItem(tokenKey, token);
      msg.textContent = "Fit " + id + " is now the baseline." + (res.note ? " " + res.note : "");
      msg.className = "pin-msg good";
      await refresh();
    } catch (e) {
      msg.textContent = e.message;
      msg.className = "pin-msg bad";
    }
  }

  function fitRow(f, writable) {
    const cmp = f.comparison;
    let verdict = cw.el("span", { class: "muted" }, f.is_baseline ? "baseline" : "–");
    if (cmp) {
      verdict = cw.el("span", { class: cmp.breach ? "verdict-inline bad" : "verdict-inline" },
        cmp.breach ? "breach" + (cmp.shifted.length ? ": " + cmp.shifted.join(", ") : "") : "within tolerance",
        cw.el("span", { class: "sub-inline" }, " vs fit " + cmp.reference_fit_id));
    }
    const action = cw.el("td", { class: "actions" });
    if (f.is_baseline) action.append(cw.el("span", { class: "tag tag-base" }, "baseline"));
    else if (writable && f.status === "succeeded") {
      action.append(cw.el("button", { type: "button", class: "pin", "data-fit": f.id, onclick: () => pin(f.id) }, "Pin as baseline"));
    }
    const status = f.status === "succeeded" ? cw.el("span", null, "succeeded")
      : cw.el("span", { class: "tag tag-bad", title: f.reason || "" }, f.status);
    return cw.el("tr", { "data-fit": f.id },
      cw.el("td", null, cw.el("a", { href: api + "/fits/" + f.id, title: "this fit as JSON" }, "#" + f.id)),
      cw.el("td", null, cw.time(f.finished)),
      cw.el("td", null, status, f.reason ? cw.el("div", { class: "sub reason" }, f.reason) : ""),
      cw.el("td", { class: "num" }, f.rows_used === null ? "–" : f.rows_used.toLocaleString("en")),
      cw.el("td", { class: "num" }, cw.pct(f.deviance_explained)),
      cw.el("td", null, verdict),
      action);
  }

  function fitsTable(ans, append) {
    const tb = $("fits").querySelector("tbody");
    if (!append) cw.clear(tb);
    for (const f of ans.fits) tb.append(fitRow(f, page.model.writable));
    $("fits").hidden = tb.children.length === 0;
    $("fits-empty").hidden = tb.children.length !== 0;
    page.fitsNext = ans.next;
    $("fits-more").hidden = !ans.next;
  }

  $("fits-more").addEventListener("click", async () => {
    if (!page.fitsNext) return;
    try {
      fitsTable(await cw.get(page.fitsNext), true);
    } catch (e) {
      cw.status("Could not load older refits: " + e.message, "bad");
    }
  });

  // ---- loading ----

  async function refresh() {
    const m = await cw.get(base);
    page.model = m;
    section("facts", () => header(m));
    section("config", () => settings(m));
    section("pin-box", () => pinBox(m));
    fitsTable(await cw.get(base + "/fits?limit=20"));
  }

  async function load() {
    const m = await cw.get(base);
    page.model = m;
    cw.setServerTime(m.generated_at);
    section("facts", () => header(m));
    section("config", () => settings(m));
    section("pin-box", () => pinBox(m));

    const c = m.latest_comparison;
    const curID = c ? c.candidate_fit_id : m.last_success ? m.last_success.id : null;
    page.current = curID;
    const [hist, al, ev, fits, comp, ref, cur] = await Promise.all([
      cw.get(base + "/history?limit=1000"),
      cw.get(api + "/alerts?model=" + encodeURIComponent(name)),
      cw.get(base + "/alert-events?limit=15"),
      cw.get(base + "/fits?limit=20"),
      c ? cw.get(api + "/comparisons/" + c.id) : null,
      c ? cw.get(api + "/fits/" + c.reference_fit_id) : null,
      curID ? cw.get(api + "/fits/" + curID) : null,
    ]);

    if (!m.last_refit) notice("No refit has run yet: the curves appear after the first refit (schedule " + m.schedule + ").");
    else if (!m.last_success) notice("No refit has succeeded yet, so there are no curves to show.", "bad");
    else if (m.last_refit.id !== m.last_success.id) {
      notice("The latest refit, fit " + m.last_refit.id + ", " + (m.last_refit.status === "failed" ? "failed" : "did not converge") +
        ": the curves below are from fit " + m.last_success.id + ", the latest success.", "bad");
    }
    if (c && m.last_success && m.last_success.id > c.candidate_fit_id) {
      notice("Fit " + m.last_success.id + " is newer than the latest comparison (fit " + c.candidate_fit_id + " vs fit " + c.reference_fit_id + ") and has not been compared; the curves below show that comparison.");
    }
    if (comp && comp.report.warnings && comp.report.warnings.length) {
      for (const w of comp.report.warnings) notice("Comparison note: " + w);
    }

    section("curves", () => curves(comp, ref, cur));
    section("surfaces", () => surfaces(comp, ref, cur));
    section("coefs", () => coefficients(comp, ref, cur));
    section("score-history", () => historyCharts(hist));
    section("alerts", () => alertsTable(al.alerts));
    section("alert-events", () => eventsList(ev));
    section("fits", () => fitsTable(fits));
    cw.status("");
  }

  load().then(() => cw.done(), (err) => cw.done(err));
})();
