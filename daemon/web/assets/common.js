// curvewatch dashboard: shared helpers. Loaded first (not deferred), so
// that the error hook below sees every later script's errors.
"use strict";

(function () {
  // Script errors are recorded on <body data-errors="N"> and listed in
  // window.cwErrors, so that people (a banner) and the browser test (the
  // attribute) both see them.
  const errors = [];
  window.cwErrors = errors;
  function record(msg) {
    errors.push(String(msg));
    const mark = () => {
      document.body.dataset.errors = String(errors.length);
      document.body.dataset.errorText = errors.join(" | ").slice(0, 2000);
    };
    if (document.body) mark(); else document.addEventListener("DOMContentLoaded", mark);
  }
  window.addEventListener("error", (e) => {
    record((e.message || "error") + (e.filename ? " at " + e.filename + ":" + e.lineno : ""));
  });
  window.addEventListener("unhandledrejection", (e) => {
    record("unhandled rejection: " + (e.reason && e.reason.message ? e.reason.message : e.reason));
  });
  document.addEventListener("DOMContentLoaded", () => {
    document.body.dataset.errors = String(errors.length);
  });
})();

const cw = {};

// el builds an HTML element: attrs are attributes (class, data-*, …) or,
// for on*, listeners; children are nodes or strings.
cw.el = function (tag, attrs, ...children) {
  const e = document.createElement(tag);
  cw.set(e, attrs);
  cw.append(e, children);
  return e;
};

cw.SVG = "http://www.w3.org/2000/svg";

// svg builds an SVG element the same way.
cw.svg = function (tag, attrs, ...children) {
  const e = document.createElementNS(cw.SVG, tag);
  cw.set(e, attrs);
  cw.append(e, children);
  return e;
};

cw.set = function (e, attrs) {
  if (!attrs) return;
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k.startsWith("on") && typeof v === "function") e.addEventListener(k.slice(2), v);
    else e.setAttribute(k, v === true ? "" : String(v));
  }
};

cw.append = function (e, children) {
  for (const c of children.flat(Infinity)) {
    if (c === null || c === undefined || c === false) continue;
    e.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
};

// get fetches JSON from the API; a failure throws an Error carrying the
// API's own message.
cw.get = async function (url, options) {
  let res;
  try {
    res = await fetch(url, Object.assign({ headers: { Accept: "application/json" } }, options || {}));
  } catch (e) {
    throw new Error("the daemon did not answer (" + e.message + ")");
  }
  let body = null;
  try {
    body = await res.json();
  } catch (e) {
    body = null;
  }
  if (!res.ok) {
    const err = new Error(body && body.error ? body.error : "HTTP " + res.status);
    err.status = res.status;
    throw err;
  }
  return body;
};

// States of a model, most urgent first: the word, and a description.
cw.states = {
  failing: { word: "failing", help: "the latest refit failed or did not converge" },
  stale: { word: "stale", help: "the source stopped delivering rows" },
  shifted: { word: "shifted", help: "the latest comparison breached the tolerance" },
  awaiting: { word: "awaiting comparison", help: "fitted; nothing to compare with yet" },
  no_data: { word: "no data yet", help: "no refit has run yet" },
  steady: { word: "steady", help: "the latest comparison was within the tolerance" },
};
cw.stateOrder = ["failing", "stale", "shifted", "awaiting", "no_data", "steady"];

cw.chip = function (state, text) {
  const s = cw.states[state] || { word: state, help: "" };
  return cw.el("span", { class: "chip chip-" + state, title: s.help }, text || s.word);
};

cw.alertChip = function (state) {
  return cw.el("span", { class: "chip chip-alert-" + state }, state);
};

// fmt formats a number with about `digits` significant digits.
cw.fmt = function (v, digits) {
  if (v === null || v === undefined || !isFinite(v)) return "–";
  digits = digits || 3;
  const a = Math.abs(v);
  if (a !== 0 && (a >= 1e5 || a < 1e-3)) return v.toExponential(Math.max(0, digits - 1));
  return Number(v.toPrecision(digits)).toLocaleString("en", { maximumFractionDigits: 6 });
};

// score formats a shift score.
cw.score = function (v) {
  if (v === null || v === undefined || !isFinite(v)) return "–";
  return v >= 100 ? v.toFixed(0) : v >= 10 ? v.toFixed(1) : v.toFixed(2);
};

cw.pct = function (v) {
  if (v === null || v === undefined || !isFinite(v)) return "–";
  return (100 * v).toFixed(1) + "%";
};

// The server's clock: relative times are taken against generated_at, plus
// the time since it was fetched, so that a skewed client clock does not
// matter.
cw.clock = { server: null, local: 0 };
cw.setServerTime = function (iso) {
  const t = Date.parse(iso);
  if (isFinite(t)) cw.clock = { server: t, local: Date.now() };
};
cw.now = function () {
  return cw.clock.server === null ? Date.now() : cw.clock.server + (Date.now() - cw.clock.local);
};

cw.ago = function (iso) {
  const t = Date.parse(iso);
  if (!isFinite(t)) return "–";
  let s = Math.round((cw.now() - t) / 1000);
  const future = s < 0;
  s = Math.abs(s);
  let text;
  if (s < 45) text = "just now";
  else if (s < 90 * 60) text = Math.round(s / 60) + " min";
  else if (s < 36 * 3600) text = Math.round(s / 3600) + " h";
  else if (s < 60 * 86400) text = Math.round(s / 86400) + " d";
  else text = Math.round(s / (30 * 86400)) + " mo";
  if (text === "just now") return text;
  return future ? "in " + text : text + " ago";
};

cw.when = function (iso) {
  const t = new Date(iso);
  if (!isFinite(t.getTime())) return "–";
  return t.toISOString().slice(0, 16).replace("T", " ") + " UTC";
};

cw.day = function (iso) {
  const t = new Date(iso);
  if (!isFinite(t.getTime())) return "–";
  return t.toISOString().slice(0, 10);
};

// time renders a relative time with the exact one as its tooltip.
cw.time = function (iso) {
  return cw.el("time", { datetime: iso, title: cw.when(iso) }, cw.ago(iso));
};

cw.status = function (text, kind) {
  const s = document.getElementById("load-status");
  if (!s) return;
  s.textContent = text || "";
  s.className = "load-status" + (kind ? " " + kind : "");
  s.hidden = !text;
};

// done marks the page drawn (data-state="ready"), or failed.
cw.done = function (err) {
  if (err) {
    document.body.dataset.state = "error";
    cw.status("Could not load: " + err.message, "bad");
    return;
  }
  document.body.dataset.state = "ready";
  if (window.cwErrors.length) cw.status("Part of the page failed to draw: " + window.cwErrors[0], "bad");
};

cw.clear = function (node) {
  while (node.firstChild) node.removeChild(node.firstChild);
  return node;
};

cw.kindWords = {
  curve_shift: "curve shift",
  coefficient_shift: "coefficient shift",
  level_shift: "level shift",
  noise_change: "noise change",
  predictive_degradation: "predictive degradation",
  refit_failing: "refits failing",
  data_stale: "data stopped",
};
cw.kind = function (k) {
  return cw.kindWords[k] || k;
};
