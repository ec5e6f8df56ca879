// curvewatch dashboard: SVG charts (curves with bands, heat maps, history
// lines, estimates with intervals). Plain functions returning <svg>
// elements; styling is in app.css.
"use strict";

const charts = {};

// Colours for several lines at once (distinguishable with the common
// colour-vision deficiencies), and the diverging scale of heat maps.
charts.palette = ["#2563a8", "#d97a0f", "#1f8a5b", "#b8457f", "#5aa0d8", "#a3421c", "#6b5bb5", "#3f4a55"];

charts.scale = function (d0, d1, r0, r1) {
  if (!(d1 > d0)) {
    const pad = Math.abs(d0) > 0 ? Math.abs(d0) * 0.1 : 1;
    d0 -= pad;
    d1 += pad;
  }
  const k = (r1 - r0) / (d1 - d0);
  const f = (v) => r0 + (v - d0) * k;
  f.domain = [d0, d1];
  f.range = [r0, r1];
  f.invert = (p) => d0 + (p - r0) / k;
  return f;
};

// extent is [min, max] of the finite values of the arrays.
charts.extent = function (...arrays) {
  let lo = Infinity;
  let hi = -Infinity;
  for (const a of arrays.flat(Infinity)) {
    if (a === null || a === undefined || !isFinite(a)) continue;
    if (a < lo) lo = a;
    if (a > hi) hi = a;
  }
  return lo <= hi ? [lo, hi] : [0, 1];
};

// pad widens [lo, hi] by a fraction on each side.
charts.pad = function (ext, frac) {
  const span = ext[1] - ext[0] || Math.abs(ext[0]) || 1;
  return [ext[0] - span * frac, ext[1] + span * frac];
};

// ticks returns about n round values covering [lo, hi].
charts.ticks = function (lo, hi, n) {
  const span = hi - lo;
  if (!(span > 0) || !isFinite(span)) return [lo];
  const raw = span / Math.max(1, n);
  const mag = Math.pow(10, Math.floor(Math.log10(raw)));
  const norm = raw / mag;
  const step = (norm >= 5 ? 10 : norm >= 2 ? 5 : norm >= 1.5 ? 2 : 1) * mag;
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) {
    out.push(Math.abs(v) < step * 1e-9 ? 0 : Number(v.toPrecision(12)));
  }
  return out;
};

charts.tickText = function (v) {
  const a = Math.abs(v);
  if (a !== 0 && (a >= 1e6 || a < 1e-4)) return v.toExponential(1);
  return String(Number(v.toPrecision(6)));
};

// line is an SVG path through the finite points.
charts.line = function (xs, ys, sx, sy) {
  let d = "";
  let pen = false;
  for (let i = 0; i < xs.length; i++) {
    const x = xs[i];
    const y = ys[i];
    if (x === null || y === null || !isFinite(x) || !isFinite(y)) {
      pen = false;
      continue;
    }
    d += (pen ? "L" : "M") + sx(x).toFixed(1) + "," + sy(y).toFixed(1);
    pen = true;
  }
  return d;
};

// area is a closed SVG path between lo and hi.
charts.area = function (xs, lo, hi, sx, sy) {
  const top = [];
  const bottom = [];
  for (let i = 0; i < xs.length; i++) {
    if (!isFinite(xs[i]) || !isFinite(lo[i]) || !isFinite(hi[i])) continue;
    top.push(sx(xs[i]).toFixed(1) + "," + sy(hi[i]).toFixed(1));
    bottom.push(sx(xs[i]).toFixed(1) + "," + sy(lo[i]).toFixed(1));
  }
  if (!top.length) return "";
  return "M" + top.join("L") + "L" + bottom.reverse().join("L") + "Z";
};

charts.axisY = function (g, sy, x0, x1, n, label, fmt) {
  const [lo, hi] = sy.domain;
  const ticks = charts.ticks(lo, hi, n);
  const step = ticks.length > 1 ? ticks[1] - ticks[0] : 1;
  for (const t of ticks) {
    const y = sy(t);
    g.append(cw.svg("line", { class: "gridline", x1: x0, x2: x1, y1: y, y2: y }));
    g.append(cw.svg("text", { class: "tick", x: x0 - 5, y: y + 3.5, "text-anchor": "end" }, (fmt || charts.tickText)(t, step)));
  }
  if (label) {
    const mid = (sy.range[0] + sy.range[1]) / 2;
    g.append(cw.svg("text", { class: "axis-label", transform: "translate(11," + mid + ") rotate(-90)", "text-anchor": "middle" }, label));
  }
};

charts.axisX = function (g, sx, y, n, fmt) {
  const [lo, hi] = sx.domain;
  for (const t of charts.ticks(lo, hi, n)) {
    const x = sx(t);
    g.append(cw.svg("line", { class: "tickmark", x1: x, x2: x, y1: y, y2: y + 4 }));
    g.append(cw.svg("text", { class: "tick", x: x, y: y + 15, "text-anchor": "middle" }, (fmt || charts.tickText)(t)));
  }
};

// curve draws one curve term: a main panel with the bands and lines, an
// optional difference panel, and a data strip (row counts, or each fit's
// data range) along the shared x axis.
//
//	opts = {term, xLabel, x, bands: [{lo, hi, cls}], lines: [{y, cls}],
//	        outside: [[a, b]], diff: {y, lo, hi, margin} | null,
//	        density: {x, counts} | null, ranges: [{lo, hi, cls, label}]}
charts.curve = function (opts) {
  const W = 560;
  const L = 50;
  const R = 12;
  const top = 8;
  const mainH = opts.diff ? 176 : 214;
  const diffTop = top + mainH + 18;
  const diffH = opts.diff ? 76 : 0;
  const stripTop = (opts.diff ? diffTop + diffH : top + mainH) + 8;
  const stripH = 18;
  const axisY = stripTop + stripH + 2;
  const H = axisY + 34;
  const svg = cw.svg("svg", {
    class: "chart curve-chart", viewBox: "0 0 " + W + " " + H, role: "img",
    "data-term": opts.term, "aria-label": opts.label || "Curve " + opts.term,
  });
  const sx = charts.scale(opts.x[0], opts.x[opts.x.length - 1], L, W - R);
  const yext = charts.pad(charts.extent(opts.bands.map((b) => [b.lo, b.hi]), opts.lines.map((l) => l.y)), 0.06);
  const sy = charts.scale(yext[0], yext[1], top + mainH, top);

  // Where the shift is outside the band: shaded lightly in the main
  // panel, more strongly in the difference panel, and marked on the axis.
  for (const [a, b] of opts.outside || []) {
    const x0 = sx(Math.max(a, sx.domain[0]));
    const x1 = sx(Math.min(b, sx.domain[1]));
    const tip = () => cw.svg("title", null, "outside the band: " + cw.fmt(a) + " to " + cw.fmt(b));
    svg.append(cw.svg("rect", { class: "outside", x: x0, y: top, width: Math.max(1.5, x1 - x0), height: mainH }, tip()));
    if (opts.diff) {
      svg.append(cw.svg("rect", { class: "outside outside-diff", x: x0, y: diffTop, width: Math.max(1.5, x1 - x0), height: diffH }, tip()));
    }
  }

  const g = cw.svg("g");
  svg.append(g);
  charts.axisY(g, sy, L, W - R, 5, opts.yLabel);
  if (yext[0] < 0 && yext[1] > 0) g.append(cw.svg("line", { class: "zero", x1: L, x2: W - R, y1: sy(0), y2: sy(0) }));
  for (const b of opts.bands) g.append(cw.svg("path", { class: "band " + b.cls, d: charts.area(opts.x, b.lo, b.hi, sx, sy) }));
  for (const l of opts.lines) g.append(cw.svg("path", { class: "series " + l.cls, d: charts.line(opts.x, l.y, sx, sy) }));
  g.append(cw.svg("rect", { class: "frame", x: L, y: top, width: W - R - L, height: mainH }));

  if (opts.diff) {
    const d = opts.diff;
    const m = d.margin > 0 ? d.margin : 0;
    const dext = charts.pad(charts.extent(d.lo, d.hi, d.y, m ? [m, -m] : [], [0]), 0.08);
    const sd = charts.scale(dext[0], dext[1], diffTop + diffH, diffTop);
    const gd = cw.svg("g", { class: "diff" });
    svg.append(gd);
    charts.axisY(gd, sd, L, W - R, 2, null);
    gd.append(cw.svg("path", { class: "band band-diff", d: charts.area(opts.x, d.lo, d.hi, sx, sd) }));
    gd.append(cw.svg("line", { class: "zero", x1: L, x2: W - R, y1: sd(0), y2: sd(0) }));
    if (m) {
      for (const v of [m, -m]) {
        if (v >= dext[0] && v <= dext[1]) gd.append(cw.svg("line", { class: "margin", x1: L, x2: W - R, y1: sd(v), y2: sd(v) }));
      }
    }
    gd.append(cw.svg("path", { class: "series series-diff", d: charts.line(opts.x, d.y, sx, sd) }));
    gd.append(cw.svg("rect", { class: "frame", x: L, y: diffTop, width: W - R - L, height: diffH }));
    gd.append(cw.svg("text", { class: "panel-label", x: L, y: diffTop - 4 }, "difference, current − reference"));
  }

  // The data strip: a histogram of row counts when the fit recorded them,
  // else where each fit had data.
  const gs = cw.svg("g", { class: "strip" });
  svg.append(gs);
  if (opts.density && opts.density.counts.length) {
    const c = opts.density.counts;
    const xs = opts.density.x;
    const cmax = Math.max(...c.filter(isFinite), 1);
    const w = xs.length > 1 ? Math.abs(sx(xs[1]) - sx(xs[0])) : 4;
    for (let i = 0; i < xs.length; i++) {
      if (!(c[i] > 0) || xs[i] < sx.domain[0] || xs[i] > sx.domain[1]) continue;
      const h = Math.max(1, (stripH * c[i]) / cmax);
      gs.append(cw.svg("rect", { class: "density", x: sx(xs[i]) - w / 2, y: stripTop + stripH - h, width: Math.max(1, w - 0.3), height: h }));
    }
    gs.append(cw.svg("title", null, "rows fitted along " + opts.xLabel));
  } else if (opts.ranges && opts.ranges.length) {
    const each = stripH / opts.ranges.length;
    opts.ranges.forEach((r, i) => {
      const a = sx(Math.max(r.lo, sx.domain[0]));
      const b = sx(Math.min(r.hi, sx.domain[1]));
      gs.append(cw.svg("rect", { class: "range " + r.cls, x: a, y: stripTop + i * each + 2, width: Math.max(1, b - a), height: each - 4 },
        cw.svg("title", null, r.label + ": " + cw.fmt(r.lo) + " to " + cw.fmt(r.hi))));
    });
  }
  if (gs.childNodes.length) gs.append(cw.svg("text", { class: "tick", x: L - 5, y: stripTop + stripH / 2 + 3.5, "text-anchor": "end" }, "data"));
  gs.append(cw.svg("line", { class: "axis", x1: L, x2: W - R, y1: axisY, y2: axisY }));
  charts.axisX(gs, sx, axisY, 6);
  svg.append(cw.svg("text", { class: "axis-label", x: (L + W - R) / 2, y: H - 3, "text-anchor": "middle" }, opts.xLabel));
  // Outside intervals also marked on the axis, so they read in grey print.
  for (const [a, b] of opts.outside || []) {
    svg.append(cw.svg("line", { class: "outside-axis", x1: sx(Math.max(a, sx.domain[0])), x2: sx(Math.min(b, sx.domain[1])), y1: axisY, y2: axisY }));
  }
  return svg;
};

// divergent maps t in [-1, 1] to a colour: blue below 0, near-white at 0,
// orange above.
charts.divergent = function (t) {
  t = Math.max(-1, Math.min(1, t));
  const mid = [246, 246, 244];
  const neg = [38, 99, 168];
  const pos = [196, 98, 24];
  const end = t < 0 ? neg : pos;
  const a = Math.pow(Math.abs(t), 0.9);
  const c = mid.map((m, i) => Math.round(m + (end[i] - m) * a));
  return "rgb(" + c.join(",") + ")";
};

// heatmap draws z[i][j] at (x1[i], x2[j]) with a symmetric colour range
// ±vmax. mask[i][j] true greys a cell out (far from the data, or
// excluded); mark[i][j] true outlines it.
charts.heatmap = function (opts) {
  const W = 300;
  const L = 46;
  const R = 8;
  const top = 22;
  const size = W - L - R;
  const H = top + size + 58;
  const svg = cw.svg("svg", { class: "chart heatmap", viewBox: "0 0 " + W + " " + H, role: "img", "aria-label": opts.label || opts.title });
  const { x1, x2, z } = opts;
  svg.append(cw.svg("text", { class: "panel-title", x: L, y: 14 }, opts.title));
  if (!x1 || !x2 || !z || !x1.length || !x2.length) {
    svg.append(cw.svg("text", { class: "muted-text", x: L, y: top + 20 }, "no grid"));
    return svg;
  }
  const sx = charts.scale(x1[0], x1[x1.length - 1], L, L + size);
  const sy = charts.scale(x2[0], x2[x2.length - 1], top + size, top);
  const cw1 = size / Math.max(1, x1.length - 1);
  const ch = size / Math.max(1, x2.length - 1);
  const g = cw.svg("g", { class: "cells" });
  svg.append(g);
  const vmax = opts.vmax > 0 ? opts.vmax : 1;
  for (let i = 0; i < x1.length; i++) {
    for (let j = 0; j < x2.length; j++) {
      const v = z[i] ? z[i][j] : null;
      const masked = opts.mask && opts.mask[i] && opts.mask[i][j];
      const x = Math.max(L, sx(x1[i]) - cw1 / 2);
      const y = Math.max(top, sy(x2[j]) - ch / 2);
      const w = Math.min(L + size, sx(x1[i]) + cw1 / 2) - x;
      const h = Math.min(top + size, sy(x2[j]) + ch / 2) - y;
      const attrs = { x: x.toFixed(2), y: y.toFixed(2), width: (w + 0.4).toFixed(2), height: (h + 0.4).toFixed(2) };
      if (masked || v === null || !isFinite(v)) {
        attrs.class = "far";
      } else {
        attrs.fill = charts.divergent(v / vmax);
      }
      g.append(cw.svg("rect", attrs));
    }
  }
  if (opts.mark) {
    for (let i = 0; i < x1.length; i++) {
      for (let j = 0; j < x2.length; j++) {
        if (!(opts.mark[i] && opts.mark[i][j])) continue;
        svg.append(cw.svg("rect", { class: "marked", x: sx(x1[i]) - cw1 / 2, y: sy(x2[j]) - ch / 2, width: cw1, height: ch }));
      }
    }
  }
  svg.append(cw.svg("rect", { class: "frame", x: L, y: top, width: size, height: size }));
  charts.axisY(svg, sy, L, L, 4, opts.yLabel);
  charts.axisX(svg, sx, top + size, 4);
  svg.append(cw.svg("text", { class: "axis-label", x: L + size / 2, y: top + size + 28, "text-anchor": "middle" }, opts.xLabel));
  // Colour key.
  const ky = top + size + 38;
  const kw = size * 0.6;
  const kx = L + (size - kw) / 2;
  for (let k = 0; k < 24; k++) {
    svg.append(cw.svg("rect", { x: kx + (k * kw) / 24, y: ky, width: kw / 24 + 0.3, height: 7, fill: charts.divergent(-1 + (2 * k + 1) / 24) }));
  }
  svg.append(cw.svg("text", { class: "tick", x: kx - 4, y: ky + 7, "text-anchor": "end" }, charts.tickText(-Number(vmax.toPrecision(2)))));
  svg.append(cw.svg("text", { class: "tick", x: kx + kw + 4, y: ky + 7 }, "+" + charts.tickText(Number(vmax.toPrecision(2)))));
  return svg;
};

// lines draws series over time: opts = {series: [{name, color, pts: [{t,
// v, title}]}], ref: y of a dashed reference line | null, refLabel,
// yLabel, yMin, yMax, marks: [{t, title}] (failed refits, on the x axis)}.
charts.lines = function (opts) {
  const W = 560;
  const L = 50;
  const R = 12;
  const top = 10;
  const h = 190;
  const H = top + h + 40;
  const svg = cw.svg("svg", { class: "chart lines-chart", viewBox: "0 0 " + W + " " + H, role: "img", "aria-label": opts.label || "" });
  const ts = [];
  const vs = [];
  for (const s of opts.series) for (const p of s.pts) { ts.push(p.t); vs.push(p.v); }
  if (!ts.length) {
    svg.setAttribute("viewBox", "0 0 " + W + " 40");
    svg.append(cw.svg("text", { class: "muted-text", x: L, y: 24 }, opts.empty || "nothing to show yet"));
    return svg;
  }
  for (const m of opts.marks || []) ts.push(m.t);
  let [t0, t1] = charts.extent(ts);
  if (t1 === t0) { t0 -= 43200e3; t1 += 43200e3; }
  let yext = charts.extent(vs, opts.ref === null || opts.ref === undefined ? [] : [opts.ref]);
  if (opts.yMin !== undefined) yext[0] = Math.min(yext[0], opts.yMin);
  yext = charts.pad(yext, 0.08);
  if (opts.clamp) yext = [Math.max(opts.clamp[0], yext[0]), Math.min(opts.clamp[1], yext[1])];
  const sx = charts.scale(t0, t1, L, W - R);
  const sy = charts.scale(yext[0], yext[1], top + h, top);
  charts.axisY(svg, sy, L, W - R, 5, opts.yLabel, opts.yFmt);
  if (opts.ref !== null && opts.ref !== undefined) {
    svg.append(cw.svg("line", { class: "refline", x1: L, x2: W - R, y1: sy(opts.ref), y2: sy(opts.ref) }));
    svg.append(cw.svg("text", { class: "ref-label", x: W - R - 4, y: sy(opts.ref) - 4, "text-anchor": "end" }, opts.refLabel || ""));
  }
  const dense = ts.length > 160;
  for (const s of opts.series) {
    const pts = s.pts.filter((p) => p.v !== null && isFinite(p.v));
    svg.append(cw.svg("path", { class: "series", stroke: s.color, d: charts.line(pts.map((p) => p.t), pts.map((p) => p.v), sx, sy) }));
    if (!dense) {
      for (const p of pts) {
        svg.append(cw.svg("circle", { class: "pt" + (p.hot ? " hot" : ""), cx: sx(p.t), cy: sy(p.v), r: p.hot ? 3.6 : 2.6, fill: s.color },
          cw.svg("title", null, p.title || "")));
      }
    }
  }
  for (const m of opts.marks || []) {
    svg.append(cw.svg("path", { class: "fail-mark", d: "M" + (sx(m.t) - 3.5) + "," + (top + h - 7) + "l7,7m0,-7l-7,7" }, cw.svg("title", null, m.title)));
  }
  svg.append(cw.svg("rect", { class: "frame", x: L, y: top, width: W - R - L, height: h }));
  // Time axis: days.
  const span = t1 - t0;
  const n = span > 3 * 86400e3 ? 6 : 3;
  for (let k = 0; k <= n; k++) {
    const t = t0 + (span * k) / n;
    const x = sx(t);
    svg.append(cw.svg("line", { class: "tickmark", x1: x, x2: x, y1: top + h, y2: top + h + 4 }));
    const d = new Date(t);
    const label = span > 3 * 86400e3 ? d.toISOString().slice(5, 10) : d.toISOString().slice(5, 16).replace("T", " ");
    svg.append(cw.svg("text", { class: "tick", x: x, y: top + h + 16, "text-anchor": k === 0 ? "start" : k === n ? "end" : "middle" }, label));
  }
  svg.append(cw.svg("text", { class: "axis-label", x: (L + W - R) / 2, y: H - 4, "text-anchor": "middle" },
    "refit finished (UTC, " + new Date(t0).toISOString().slice(0, 4) + ")"));
  return svg;
};

// intervals draws estimates with 95% intervals: opts = {rows: [{label,
// items: [{est, lo, hi, cls, title}]}], zero: true to draw 0}.
charts.intervals = function (opts) {
  const W = 420;
  const L = 92;
  const R = 14;
  const rowH = 30;
  const top = 6;
  const H = top + rowH * opts.rows.length + 30;
  const svg = cw.svg("svg", { class: "chart intervals", viewBox: "0 0 " + W + " " + H, role: "img", "aria-label": opts.label || "" });
  const vals = [];
  for (const r of opts.rows) for (const it of r.items) vals.push(it.est, it.lo, it.hi);
  const ext = charts.pad(charts.extent(vals, opts.zero ? [0] : []), 0.08);
  const sx = charts.scale(ext[0], ext[1], L, W - R);
  const bottom = top + rowH * opts.rows.length;
  for (const t of charts.ticks(ext[0], ext[1], 5)) {
    svg.append(cw.svg("line", { class: "gridline", x1: sx(t), x2: sx(t), y1: top, y2: bottom }));
    svg.append(cw.svg("text", { class: "tick", x: sx(t), y: bottom + 14, "text-anchor": "middle" }, charts.tickText(t)));
  }
  if (opts.zero && ext[0] < 0 && ext[1] > 0) svg.append(cw.svg("line", { class: "zero", x1: sx(0), x2: sx(0), y1: top, y2: bottom }));
  opts.rows.forEach((r, i) => {
    const yc = top + rowH * i + rowH / 2;
    svg.append(cw.svg("text", { class: "row-label", x: L - 8, y: yc + 4, "text-anchor": "end" }, r.label));
    const k = r.items.length;
    r.items.forEach((it, j) => {
      const y = yc + (k > 1 ? (j - (k - 1) / 2) * 9 : 0);
      const g = cw.svg("g", { class: "est " + it.cls }, cw.svg("title", null, it.title || ""));
      if (isFinite(it.lo) && isFinite(it.hi) && it.hi > it.lo) {
        g.append(cw.svg("line", { class: "whisker", x1: sx(it.lo), x2: sx(it.hi), y1: y, y2: y }));
        g.append(cw.svg("line", { class: "whisker", x1: sx(it.lo), x2: sx(it.lo), y1: y - 3, y2: y + 3 }));
        g.append(cw.svg("line", { class: "whisker", x1: sx(it.hi), x2: sx(it.hi), y1: y - 3, y2: y + 3 }));
      }
      if (isFinite(it.est)) g.append(cw.svg(it.shape === "square" ? "rect" : "circle", it.shape === "square"
        ? { class: "dot", x: sx(it.est) - 3.4, y: y - 3.4, width: 6.8, height: 6.8 }
        : { class: "dot", cx: sx(it.est), cy: y, r: 3.8 }));
      svg.append(g);
    });
  });
  svg.append(cw.svg("line", { class: "axis", x1: L, x2: W - R, y1: bottom, y2: bottom }));
  if (opts.xLabel) svg.append(cw.svg("text", { class: "axis-label", x: (L + W - R) / 2, y: H - 3, "text-anchor": "middle" }, opts.xLabel));
  return svg;
};
