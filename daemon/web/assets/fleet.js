// curvewatch dashboard: the fleet page.
"use strict";

(function () {
  const view = { models: [], key: "state", dir: 1, filter: "" };
  const table = document.getElementById("fleet");
  const tbody = table.querySelector("tbody");

  const sorters = {
    name: (m) => m.name,
    state: (m) => cw.stateOrder.indexOf(m.state) * 1e6 - (m.worst_shift_score || 0),
    last: (m) => (m.last_refit ? -Date.parse(m.last_refit.finished) : Infinity),
    score: (m) => (m.worst_shift_score === null ? Infinity : -m.worst_shift_score),
    dev: (m) => (m.deviance_explained === null ? Infinity : -m.deviance_explained),
    alerts: (m) => -m.firing_alerts.length,
    schedule: (m) => m.schedule,
  };

  function compare(a, b) {
    const f = sorters[view.key];
    const x = f(a);
    const y = f(b);
    let c = 0;
    if (typeof x === "string") c = x.localeCompare(y);
    else c = x < y ? -1 : x > y ? 1 : 0;
    return c * view.dir || a.name.localeCompare(b.name);
  }

  // scoreBar is a small gauge: the bar grows to 2, with a tick at 1 (the
  // band's edge).
  function scoreBar(v) {
    const w = 64;
    const frac = Math.max(0, Math.min(1, v / 2));
    return cw.svg("svg", { class: "gauge", viewBox: "0 0 " + w + " 10", width: w, height: 10, "aria-hidden": "true" },
      cw.svg("rect", { class: "gauge-track", x: 0, y: 2, width: w, height: 6, rx: 3 }),
      cw.svg("rect", { class: "gauge-fill" + (v > 1 ? " over" : ""), x: 0, y: 2, width: Math.max(2, w * frac), height: 6, rx: 3 }),
      cw.svg("line", { class: "gauge-edge", x1: w / 2, x2: w / 2, y1: 0, y2: 10 }));
  }

  function row(m) {
    const last = m.last_refit;
    const lastCell = cw.el("td");
    if (last) {
      lastCell.append(cw.time(last.finished));
      if (last.status !== "succeeded") lastCell.append(" ", cw.el("span", { class: "tag tag-bad" }, last.status));
      if (m.last_success && m.last_success.id !== last.id) {
        lastCell.append(cw.el("div", { class: "sub" }, "last success ", cw.time(m.last_success.finished)));
      }
    } else {
      lastCell.append(cw.el("span", { class: "muted" }, "never"));
    }
    const score = m.worst_shift_score;
    const c = m.latest_comparison;
    const scoreCell = cw.el("td", { class: "num" });
    if (score === null) {
      scoreCell.append(cw.el("span", { class: "muted" }, "–"));
    } else {
      scoreCell.append(cw.el("span", { class: "score" + (score > 1 ? " over" : ""), title: c && c.worst_term ? "worst term: " + c.worst_term : "" },
        cw.score(score)), " ", scoreBar(score));
      if (c && c.worst_term) scoreCell.append(cw.el("div", { class: "sub" }, c.worst_term));
    }
    const alertsCell = cw.el("td");
    if (m.firing_alerts.length) {
      const ul = cw.el("ul", { class: "alert-list" });
      for (const a of m.firing_alerts) {
        ul.append(cw.el("li", { class: "sev-" + a.severity, title: a.summary },
          cw.kind(a.kind) + (a.term ? " · " + a.term : ""), " ", cw.el("span", { class: "sub-inline" }, cw.ago(a.since))));
      }
      alertsCell.append(ul);
    } else {
      alertsCell.append(cw.el("span", { class: "muted" }, m.alerts_pending ? m.alerts_pending + " pending" : "none"));
    }
    return cw.el("tr", { "data-model": m.name, "data-state": m.state },
      cw.el("th", { scope: "row" }, cw.el("a", { href: m.page }, m.name), cw.el("div", { class: "sub" }, m.table)),
      cw.el("td", null, cw.chip(m.state), cw.el("div", { class: "sub state-text", title: m.state_text }, m.state_text)),
      lastCell,
      scoreCell,
      cw.el("td", { class: "num" }, cw.pct(m.deviance_explained)),
      alertsCell,
      cw.el("td", null, cw.el("code", null, m.schedule), cw.el("div", { class: "sub" }, "vs " + m.against)));
  }

  function draw() {
    const needle = view.filter.trim().toLowerCase();
    const list = view.models.filter((m) => !needle || m.name.toLowerCase().includes(needle) || m.table.toLowerCase().includes(needle));
    list.sort(compare);
    cw.clear(tbody);
    const frag = document.createDocumentFragment();
    for (const m of list) frag.append(row(m));
    tbody.append(frag);
    for (const th of table.querySelectorAll("th[data-key]")) {
      th.setAttribute("aria-sort", th.dataset.key === view.key ? (view.dir > 0 ? "ascending" : "descending") : "none");
    }
    table.hidden = false;
    if (!view.models.length) cw.status("No models are configured: add them under models: in the daemon's config.");
    else if (!list.length) cw.status("No model matches “" + view.filter + "”.");
    else cw.status("");
  }

  function counts(data) {
    const box = cw.clear(document.getElementById("counts"));
    for (const state of cw.stateOrder) {
      const n = data.counts[state] || 0;
      if (!n && (state === "stale" || state === "awaiting")) continue;
      box.append(cw.el("button", { type: "button", class: "count count-" + state + (n ? "" : " zero"), "data-state": state,
        onclick: () => { view.key = "state"; view.dir = 1; draw(); } },
        cw.el("span", { class: "count-n" }, String(n)), cw.el("span", { class: "count-word" }, cw.states[state].word)));
    }
  }

  async function load() {
    const data = await cw.get("/api/v1/models");
    cw.setServerTime(data.generated_at);
    view.models = data.models;
    counts(data);
    draw();
    document.getElementById("updated").textContent = "Updated " + cw.when(data.generated_at);
    document.getElementById("bar-status").textContent = data.writable ? "writes allowed" : "read-only";
  }

  for (const th of table.querySelectorAll("th[data-key]")) {
    th.querySelector("button").addEventListener("click", () => {
      const key = th.dataset.key;
      view.dir = view.key === key ? -view.dir : 1;
      view.key = key;
      draw();
    });
  }
  document.getElementById("filter").addEventListener("input", (e) => {
    view.filter = e.target.value;
    draw();
  });

  load().then(() => cw.done(), (err) => cw.done(err));
  // Refresh every minute; a failed refresh keeps the table and says so.
  setInterval(() => {
    load().catch((err) => cw.status("Refresh failed: " + err.message, "bad"));
  }, 60000);
})();
