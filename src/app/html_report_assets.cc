#include "app/html_report_assets.h"

namespace aftershock {

// Palette (ours): ink #1d2533 on paper #f7f5f0; losses slate #34506e; bands
// ochre #c98a2b; VaR and exceptions plum #9b2f5c; volatility pine
// #1f6f6a; swaps indigo #5147a3; zones moss #4a8c3f, saffron #e0a526,
// brick #b33a2e.
const char kReportCss[] = R"CSS(
:root { --ink:#1d2533; --paper:#f7f5f0; --card:#ffffff; --rule:#d9d4c7; --muted:#6b6a64;
  --ret:#34506e; --band:#c98a2b; --var:#9b2f5c; --vol:#1f6f6a; --swap:#5147a3;
  --green:#4a8c3f; --yellow:#e0a526; --red:#b33a2e; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
  font:14px/1.45 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; }
header { padding:18px 28px 10px; border-bottom:3px solid var(--vol); background:var(--card); }
h1 { margin:0 0 8px; font-size:22px; letter-spacing:.2px; }
h2 { font-size:18px; margin:0 0 8px; border-left:5px solid var(--vol); padding-left:10px; }
dl.run { display:flex; flex-wrap:wrap; gap:4px 26px; margin:0; }
dl.run div { white-space:nowrap; }
dl.run dt { display:inline; color:var(--muted); font-size:12px; text-transform:uppercase;
  letter-spacing:.6px; }
dl.run dd { display:inline; margin:0 0 0 6px; font-weight:600; }
details.config pre { background:#f1eee6; padding:8px; max-height:240px; overflow:auto; }
main { padding:12px 28px; }
section { background:var(--card); border:1px solid var(--rule); border-radius:6px;
  padding:14px 18px; margin:0 0 18px; }
p.hint, p.meta { color:var(--muted); margin:4px 0 10px; }
p.failed { color:var(--red); font-weight:600; }
ul.warnings { margin:4px 0 10px; padding-left:20px; color:#7a3b12; }
table.grid { border-collapse:collapse; margin:8px 0 14px; font-size:13px; }
table.grid caption { text-align:left; font-weight:600; padding:4px 0; }
table.grid th, table.grid td { border:1px solid var(--rule); padding:4px 8px; vertical-align:top; }
table.grid th { background:#efece4; font-weight:600; text-align:left; }
table.grid td.num { text-align:right; font-variant-numeric:tabular-nums; white-space:nowrap; }
table.sortable th { cursor:pointer; user-select:none; }
table.sortable th::after { content:" \2195"; color:#aaa59a; }
table.sortable th.asc::after { content:" \2191"; color:var(--ink); }
table.sortable th.desc::after { content:" \2193"; color:var(--ink); }
.chip { display:inline-block; min-width:52px; text-align:center; padding:1px 8px; border-radius:10px;
  font-size:12px; font-weight:700; color:#fff; }
.zone-green { background:var(--green); } .zone-yellow { background:var(--yellow); color:#2b2100; }
.zone-red { background:var(--red); } .zone-na { background:#a7a399; }
.gate-pass { background:var(--green); } .gate-fail { background:var(--red); }
.charts { display:flex; flex-wrap:wrap; gap:10px; }
figure.chart { margin:0; background:#fff; }
figure.chart.wide { flex:1 1 100%; }
figure.chart.half { flex:0 1 calc(50% - 10px); min-width:420px; }
figure.chart svg { width:100%; height:auto; display:block; }
.panels { display:flex; flex-wrap:wrap; gap:4px; }
.panels > svg { flex:0 0 calc(25% - 4px); min-width:260px; max-width:420px; }
figure.chart figcaption { font-weight:700; font-size:14px; padding:2px 0 0 6px; }
svg text { font-family:"DejaVu Sans", Helvetica, Arial, sans-serif; fill:var(--ink); }
svg .tick { font-size:11px; fill:#4b4a45; }
svg .grid { stroke:#ebe7dc; stroke-width:1; }
svg .axis { stroke:#8c877a; stroke-width:1; }
svg .closed { stroke:#8c877a; stroke-width:1; stroke-dasharray:1 3; }
svg .title { font-size:14px; font-weight:700; }
svg .label { font-size:12px; fill:#3b3a36; }
svg .legend { font-size:12px; }
.tables { overflow-x:auto; }
footer { margin:0 28px 28px; padding:12px 16px; border-left:5px solid var(--red); background:#fbeee9; }
)CSS";

const char kReportErrorHooks[] = R"JS(
(function () {
  var errors = [];
  function flush() {
    var s = document.getElementById('report-status');
    if (!s) return;
    s.setAttribute('data-errors', String(errors.length));
    s.textContent = errors.join('\n');
  }
  window.__reportErrors = errors;
  window.__reportFlush = flush;
  window.addEventListener('error', function (e) {
    errors.push('error: ' + (e && e.message ? e.message : String(e)));
    flush();
  });
  window.addEventListener('unhandledrejection', function (e) {
    errors.push('unhandled rejection: ' + String(e && e.reason));
    flush();
  });
  var original = console.error;
  console.error = function () {
    errors.push('console.error: ' + Array.prototype.join.call(arguments, ' '));
    flush();
    if (original) return original.apply(console, arguments);
  };
  document.addEventListener('DOMContentLoaded', flush);
})();
)JS";

const char kReportScript[] = R"JS(
(function () {
  'use strict';
  var NS = 'http://www.w3.org/2000/svg';
  var COLORS = { ret: '#34506e', band: '#c98a2b', bandFill: 'rgba(201,138,43,0.16)',
    vr: '#9b2f5c', limFill: 'rgba(155,47,92,0.14)', vol: '#1f6f6a', swap: '#5147a3',
    swapFill: 'rgba(81,71,163,0.12)', reject: '#8f8a80', rejFill: 'rgba(143,138,128,0.14)',
    hiReg: 'rgba(179,58,46,0.13)', loReg: 'rgba(31,111,106,0.12)', ink: '#1d2533',
    ref: '#9b2f5c', bar: 'rgba(52,80,110,0.55)', param: '#5147a3' };
  var data = JSON.parse(document.getElementById('report-data').textContent);
  var rendered = 0;

  function el(tag, attrs, parent) {
    var e = document.createElementNS(NS, tag);
    for (var k in attrs) if (Object.prototype.hasOwnProperty.call(attrs, k)) e.setAttribute(k, attrs[k]);
    if (parent) parent.appendChild(e);
    return e;
  }
  function txt(parent, x, y, s, cls, extra) {
    var a = { x: x, y: y };
    if (cls) a['class'] = cls;
    for (var k in extra || {}) a[k] = extra[k];
    var t = el('text', a, parent);
    t.textContent = s;
    return t;
  }
  function fmt(v) {
    if (v === null || !isFinite(v)) return '';
    var a = Math.abs(v);
    if (a !== 0 && (a >= 1e5 || a < 1e-3)) return v.toExponential(1);
    return String(parseFloat(v.toPrecision(4)));
  }
  function niceTicks(lo, hi, n) {
    var span = hi - lo;
    if (!(span > 0)) return [lo];
    var step = Math.pow(10, Math.floor(Math.log10(span / n)));
    var err = span / n / step;
    if (err >= 7.5) step *= 10; else if (err >= 3.5) step *= 5; else if (err >= 1.5) step *= 2;
    var out = [];
    for (var v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push(Math.abs(v) < step * 1e-9 ? 0 : v);
    return out;
  }
  var MIN = 60000, HOUR = 3600000, DAY = 86400000;
  var TIME_STEPS = [1000, 5000, 15000, 30000, MIN, 5 * MIN, 15 * MIN, 30 * MIN, HOUR, 3 * HOUR,
    6 * HOUR, 12 * HOUR, DAY, 2 * DAY, 7 * DAY, 14 * DAY, 30 * DAY, 91 * DAY, 182 * DAY,
    365 * DAY, 730 * DAY, 1825 * DAY, 3650 * DAY];
  function timeTicks(lo, hi, n) {
    var span = hi - lo, step = TIME_STEPS[TIME_STEPS.length - 1];
    for (var i = 0; i < TIME_STEPS.length; ++i) if (span / TIME_STEPS[i] <= n) { step = TIME_STEPS[i]; break; }
    var out = [];
    for (var v = Math.ceil(lo / step) * step; v <= hi; v += step) out.push(v);
    return { ticks: out, step: step, span: span };
  }
  function timeLabel(v, step, span) {
    var s = new Date(v).toISOString();  // YYYY-MM-DDTHH:MM:SS.sssZ, UTC
    if (step >= DAY) return s.substring(0, 10);
    if (span > DAY) return s.substring(5, 10) + ' ' + s.substring(11, 16);
    if (step < MIN) return s.substring(11, 19);
    return s.substring(11, 16);
  }
  function extent(arrays) {
    var lo = Infinity, hi = -Infinity;
    arrays.forEach(function (a) {
      if (!a) return;
      for (var i = 0; i < a.length; ++i) {
        var v = a[i];
        if (v !== null && isFinite(v)) { if (v < lo) lo = v; if (v > hi) hi = v; }
      }
    });
    if (!isFinite(lo)) { lo = 0; hi = 1; }
    if (lo === hi) { lo -= 0.5; hi += 0.5; }
    return [lo, hi];
  }
  function pad(e, f) { var d = (e[1] - e[0]) * f; return [e[0] - d, e[1] + d]; }
  // Closed hours (nights, weekends, holidays) take no width on a time axis: a
  // gap between consecutive samples longer than four times their median
  // spacing (and than ten minutes) is drawn one median spacing wide and marked.
  // Returns null when the samples have no such gap.
  function timeWarp(xs) {
    if (!xs || xs.length < 3) return null;
    var d = [];
    for (var i = 1; i < xs.length; ++i) d.push(xs[i] - xs[i - 1]);
    var med = d.slice().sort(function (a, b) { return a - b; })[Math.floor(d.length / 2)];
    if (!(med > 0)) return null;
    var cuts = [];
    for (var j = 1; j < xs.length; ++j) {
      var g = xs[j] - xs[j - 1];
      if (g > 4 * med && g > 10 * MIN) cuts.push([xs[j - 1], xs[j]]);
    }
    if (!cuts.length) return null;
    // Real time -> compressed time: each cut shrinks to `med`, linearly inside.
    function fwd(v) {
      var u = v;
      for (var k = 0; k < cuts.length; ++k) {
        var a = cuts[k][0], b = cuts[k][1];
        if (v >= b) u -= (b - a) - med;
        else if (v > a) u -= (v - a) * (1 - med / (b - a));
      }
      return u;
    }
    return { fwd: fwd, cuts: cuts };
  }
  // Ticks of a warped axis: one step for the compressed span, placed inside
  // each open stretch, thinned to at least minGap of compressed time apart.
  function warpedTicks(lo, hi, w, n) {
    var U = w.fwd(hi) - w.fwd(lo), step = TIME_STEPS[TIME_STEPS.length - 1];
    for (var i = 0; i < TIME_STEPS.length; ++i) if (U / TIME_STEPS[i] <= n) { step = TIME_STEPS[i]; break; }
    var stretches = [], a = lo;
    w.cuts.forEach(function (c) { if (c[0] >= lo && c[1] <= hi) { stretches.push([a, c[0]]); a = c[1]; } });
    stretches.push([a, hi]);
    var out = [], last = -Infinity, minGap = 0.6 * U / n;
    stretches.forEach(function (s) {
      var inside = false;
      for (var v = Math.ceil(s[0] / step) * step; v <= s[1]; v += step) {
        inside = true;
        if (w.fwd(v) - last >= minGap) { out.push(v); last = w.fwd(v); }
      }
      // A stretch shorter than the step (a short session on a long axis)
      // offers its opening time instead, so such axes still get labels.
      if (!inside && w.fwd(s[0]) - last >= minGap) { out.push(s[0]); last = w.fwd(s[0]); }
    });
    return { ticks: out, step: step, span: hi - lo };
  }

  // One framed plot: grid, ticks, axis labels, title and a legend row.
  function frame(parent, o) {
    var W = o.w, H = o.h, m = { l: 74, r: 18, t: o.legend && o.legend.length ? 50 : 32, b: 50 };
    var svg = el('svg', { viewBox: '0 0 ' + W + ' ' + H, role: 'img' }, parent);
    el('title', {}, svg).textContent = o.title;
    var pw = W - m.l - m.r, ph = H - m.t - m.b;
    var warp = o.xtime ? timeWarp(o.xs) : null;
    var sx = warp ? (function (u0, u1) {
      return function (v) { return m.l + (warp.fwd(v) - u0) / (u1 - u0) * pw; };
    })(warp.fwd(o.x[0]), warp.fwd(o.x[1]))
      : function (v) { return m.l + (v - o.x[0]) / (o.x[1] - o.x[0]) * pw; };
    var sy = function (v) { return m.t + ph - (v - o.y[0]) / (o.y[1] - o.y[0]) * ph; };
    txt(svg, m.l, 18, o.title, 'title');
    var xt;
    if (o.xtime) {
      var nt = Math.max(3, Math.floor(pw / 110));
      var tt = warp ? warpedTicks(o.x[0], o.x[1], warp, nt) : timeTicks(o.x[0], o.x[1], nt);
      xt = tt.ticks.map(function (v) { return [v, timeLabel(v, tt.step, tt.span)]; });
    } else {
      xt = niceTicks(o.x[0], o.x[1], Math.max(3, Math.floor(pw / 90))).map(function (v) { return [v, fmt(v)]; });
    }
    if (o.noXTicks) xt = [];
    xt.forEach(function (t) {
      var X = sx(t[0]);
      el('line', { x1: X, x2: X, y1: m.t, y2: m.t + ph, 'class': 'grid' }, svg);
      txt(svg, X, m.t + ph + 15, t[1], 'tick', { 'text-anchor': 'middle' });
    });
    niceTicks(o.y[0], o.y[1], Math.max(3, Math.floor(ph / 45))).forEach(function (v) {
      var Y = sy(v);
      el('line', { x1: m.l, x2: m.l + pw, y1: Y, y2: Y, 'class': 'grid' }, svg);
      txt(svg, m.l - 6, Y + 4, fmt(v), 'tick', { 'text-anchor': 'end' });
    });
    if (warp) {
      // One dotted line per closed stretch, but none closer than 6 px to the
      // last one drawn (hundreds of nights would grey the plot out).
      var lastCut = -Infinity;
      warp.cuts.forEach(function (c) {
        var X = (sx(c[0]) + sx(c[1])) / 2;
        if (X - lastCut < 6) return;
        lastCut = X;
        el('line', { x1: X, x2: X, y1: m.t, y2: m.t + ph, 'class': 'closed' }, svg);
      });
    }
    el('rect', { x: m.l, y: m.t, width: pw, height: ph, fill: 'none', 'class': 'axis' }, svg);
    txt(svg, m.l + pw / 2, H - 10, warp ? o.xlabel + '; closed hours left out (dotted lines)' : o.xlabel, 'label', { 'text-anchor': 'middle' });
    txt(svg, 0, 0, o.ylabel, 'label', { 'text-anchor': 'middle',
      transform: 'translate(16,' + (m.t + ph / 2) + ') rotate(-90)' });
    if (o.legend) {
      var lx = m.l;
      o.legend.forEach(function (it) {
        var g = el('g', { 'class': 'legend' }, svg), y = 36;
        if (it.type === 'box') el('rect', { x: lx, y: y - 8, width: 18, height: 10, fill: it.color, stroke: it.stroke || 'none' }, g);
        else if (it.type === 'dot') el('circle', { cx: lx + 9, cy: y - 3, r: 3.5, fill: 'none', stroke: it.color, 'stroke-width': 1.6 }, g);
        else el('line', { x1: lx, x2: lx + 18, y1: y - 3, y2: y - 3, stroke: it.color, 'stroke-width': 2, 'stroke-dasharray': it.dash || '' }, g);
        var t = txt(g, lx + 24, y + 1, it.label, 'legend');
        lx += 24 + 7.2 * it.label.length + 18;
        return t;
      });
    }
    el('clipPath', { id: o.clip }, svg).appendChild(el('rect', { x: m.l, y: m.t, width: pw, height: ph }));
    var plot = el('g', { 'clip-path': 'url(#' + o.clip + ')' }, svg);
    return { svg: svg, plot: plot, sx: sx, sy: sy, top: m.t, bottom: m.t + ph };
  }
  // Path through (x[i], y[i]), broken where y is null.
  function pathOf(xs, ys, sx, sy) {
    var d = '', pen = false;
    for (var i = 0; i < xs.length; ++i) {
      if (ys[i] === null || !isFinite(ys[i])) { pen = false; continue; }
      d += (pen ? 'L' : 'M') + sx(xs[i]).toFixed(1) + ' ' + sy(ys[i]).toFixed(1);
      pen = true;
    }
    return d;
  }
  // Min/max buckets drawn as one path visiting both ends of every bucket.
  function rangePath(xs, lo, hi, sx, sy) {
    var d = '', pen = false;
    for (var i = 0; i < xs.length; ++i) {
      if (lo[i] === null || hi[i] === null) { pen = false; continue; }
      var X = sx(xs[i]).toFixed(1);
      d += (pen ? 'L' : 'M') + X + ' ' + sy(lo[i]).toFixed(1) + 'L' + X + ' ' + sy(hi[i]).toFixed(1);
      pen = true;
    }
    return d;
  }
  // Filled band between upper and lower series, one polygon per unbroken run.
  function bandPath(xs, up, dn, sx, sy) {
    var d = '', run = [];
    function close() {
      if (run.length > 1) {
        d += 'M' + run.map(function (i) { return sx(xs[i]).toFixed(1) + ' ' + sy(up[i]).toFixed(1); }).join('L');
        d += 'L' + run.slice().reverse().map(function (i) { return sx(xs[i]).toFixed(1) + ' ' + sy(dn[i]).toFixed(1); }).join('L') + 'Z';
      }
      run = [];
    }
    for (var i = 0; i < xs.length; ++i) {
      if (up[i] === null || dn[i] === null) close(); else run.push(i);
    }
    close();
    return d;
  }
  function xRange(xs) {
    if (!xs.length) return [0, 1];
    var a = xs[0], b = xs[xs.length - 1];
    return a === b ? [a - 1, b + 1] : [a, b];
  }
  function figure(host, cls, caption) {
    var f = document.createElement('figure');
    f.className = 'chart ' + cls;
    host.appendChild(f);
    return f;
  }

  function lossChart(host, s, idx) {
    var L = s.losses;
    var fig = figure(host, 'wide');
    var legend = [{ label: 'loss \u2212r (min/max per bucket)', color: COLORS.ret }];
    if (L.limit_lo) legend.push({ label: 'VaR ' + s.var_level + ' limit set at the previous bar', color: COLORS.limFill, type: 'box', stroke: COLORS.vr });
    legend.push({ label: 'exception: loss above the limit (' + L.n_exc + ')', color: COLORS.vr, type: 'dot' });
    var f = frame(fig, { w: 1300, h: 330, title: s.symbol + ': losses against the previous bar\u2019s VaR limit',
      xlabel: s.time_axis ? 'bar end time (UTC)' : 'bar index', ylabel: 'loss per bar, \u2212r (feed units)',
      xtime: s.time_axis, xs: L.x, x: xRange(L.x), y: pad(extent([L.lo, L.hi, L.limit_lo, L.limit_hi]), 0.04),
      legend: legend, clip: 'clip-l' + idx });
    el('line', { x1: f.sx(xRange(L.x)[0]), x2: f.sx(xRange(L.x)[1]), y1: f.sy(0), y2: f.sy(0), 'class': 'axis' }, f.plot);
    el('path', { d: rangePath(L.x, L.lo, L.hi, f.sx, f.sy), fill: 'none', stroke: COLORS.ret, 'stroke-width': 1 }, f.plot);
    if (L.limit_lo) {
      el('path', { d: bandPath(L.x, L.limit_hi, L.limit_lo, f.sx, f.sy), fill: COLORS.limFill, stroke: COLORS.vr, 'stroke-width': 1, 'class': 'limit' }, f.plot);
    }
    L.exc.forEach(function (p) {
      el('circle', { cx: f.sx(p[0]).toFixed(1), cy: f.sy(p[1]).toFixed(1), r: 3.2, fill: 'none', stroke: COLORS.vr, 'stroke-width': 1.4, 'class': 'exception' }, f.plot);
    });
  }

  // Swap marks: marks closer than MERGE_PX share one line (drawn once), and
  // their labels go to the first of LABEL_ROWS rows where they clear the label
  // before them; a label that fits no row joins the cluster before it, so no
  // mark or label is drawn over another.
  var MERGE_PX = 5, LABEL_ROWS = 3, LABEL_GAP = 4, CHAR_PX = 7.2;
  function swapClusters(swaps, sx, measure) {
    var marks = swaps.map(function (w) { return { X: sx(w[0]), v: w[1], ok: w[2] }; })
      .sort(function (a, b) { return a.X - b.X; });
    var cl = [];
    marks.forEach(function (m) {
      var c = cl[cl.length - 1];
      if (c && m.X - c.x1 < MERGE_PX) { c.x1 = m.X; c.marks.push(m); } else cl.push({ x0: m.X, x1: m.X, marks: [m] });
    });
    function label(c) {
      var acc = c.marks.filter(function (m) { return m.ok; }).map(function (m) { return m.v; });
      var rej = c.marks.length - acc.length, t = '';
      if (acc.length) t = 'v' + Math.min.apply(null, acc) + (acc.length > 1 ? '\u2013v' + Math.max.apply(null, acc) : '');
      if (rej) t += (t ? ' ' : '') + '\u2715' + rej;
      return t;
    }
    for (;;) {
      var ends = [], clash = -1;
      for (var i = 0; i < LABEL_ROWS; ++i) ends.push(-Infinity);
      for (var j = 0; j < cl.length; ++j) {
        var c = cl[j], X = (c.x0 + c.x1) / 2;
        c.text = label(c);
        c.w = measure(c.text);
        c.row = -1;
        for (var r = 0; r < LABEL_ROWS; ++r) {
          if (X + 3 >= ends[r] + LABEL_GAP) { c.row = r; ends[r] = X + 3 + c.w; break; }
        }
        if (c.row < 0) { clash = j; break; }
      }
      if (clash < 0) return cl;
      var prev = cl[clash - 1];
      prev.marks = prev.marks.concat(cl[clash].marks);
      prev.x1 = cl[clash].x1;
      cl.splice(clash, 1);
    }
  }

  function volChart(host, s, idx) {
    var V = s.vol, unit = data.meta.vol_unit;
    var fig = figure(host, 'wide');
    var legend = [{ label: 'conditional volatility', color: COLORS.vol },
      { label: 'high-vol regime', color: COLORS.hiReg, type: 'box' },
      { label: 'low-vol regime', color: COLORS.loReg, type: 'box' },
      { label: 'model swap (versions; \u2715n rejected refits)', color: COLORS.swap, dash: '6 3' },
      { label: 'rejected refits only', color: COLORS.reject, dash: '2 3' }];
    var f = frame(fig, { w: 1300, h: 320, title: s.symbol + ': conditional volatility, regimes and model swaps',
      xlabel: s.time_axis ? 'bar end time (UTC)' : 'bar index', ylabel: 'volatility (' + unit + ')',
      xtime: s.time_axis, xs: V.x, x: xRange(V.x), y: pad(extent([V.lo, V.hi]).map(function (v, i) { return i === 0 ? Math.min(0, v) : v; }), 0.04),
      legend: legend, clip: 'clip-v' + idx });
    V.regimes.forEach(function (g) {
      var x0 = f.sx(g[0]), x1 = f.sx(g[1]);
      el('rect', { x: x0, y: f.top, width: Math.max(1, x1 - x0), height: f.bottom - f.top, fill: g[2] > 0 ? COLORS.hiReg : COLORS.loReg }, f.plot);
    });
    el('path', { d: rangePath(V.x, V.lo, V.hi, f.sx, f.sy), fill: 'none', stroke: COLORS.vol, 'stroke-width': 1.3 }, f.plot);
    // Label widths as drawn (the tick font), or an upper estimate when the
    // page is not laid out.
    var measure = function (t) {
      var probe = txt(f.svg, 0, -50, t, 'tick'), w = 0;
      try { w = probe.getComputedTextLength(); } catch (e) { w = 0; }
      f.svg.removeChild(probe);
      return w > 0 ? w : CHAR_PX * t.length;
    };
    swapClusters(V.swaps, f.sx, measure).forEach(function (c) {
      var X = (c.x0 + c.x1) / 2, any = c.marks.some(function (m) { return m.ok; });
      var g = el('g', { 'class': 'swap-mark', 'data-marks': c.marks.length }, f.plot);
      el('title', {}, g).textContent = c.marks.map(function (m) { return m.ok ? 'swap to v' + m.v : 'refit rejected'; }).join('; ');
      if (c.x1 - c.x0 >= 1) el('rect', { x: c.x0, y: f.top, width: c.x1 - c.x0, height: f.bottom - f.top, fill: any ? COLORS.swapFill : COLORS.rejFill }, g);
      el('line', { x1: X, x2: X, y1: f.top, y2: f.bottom, stroke: any ? COLORS.swap : COLORS.reject,
        'stroke-width': 1.3, 'stroke-dasharray': any ? '6 3' : '2 3' }, g);
      var bg = el('rect', { x: X + 2, y: f.top + 3 + 14 * c.row, width: c.w + 2, height: 13, fill: 'rgba(255,255,255,0.85)' }, g);
      txt(g, X + 3, f.top + 13 + 14 * c.row, c.text, 'tick swap-label', { fill: any ? COLORS.swap : COLORS.reject, 'data-row': c.row });
      return bg;
    });
  }

  function pitChart(host, s, idx) {
    var P = s.pit, B = P.counts.length, fig = figure(host, 'half');
    var e = P.n / B, rel = P.counts.map(function (c) { return c / e; });
    // 95 % band of one bin's count under uniformity: n/B +- 1.96 sd, sd = sqrt(n (1/B)(1 - 1/B)).
    var half = 1.96 * Math.sqrt(P.n * (1 / B) * (1 - 1 / B)) / e;
    var ymax = Math.max(1 + half, Math.max.apply(null, rel)) * 1.2;
    var f = frame(fig, { w: 640, h: 420, title: s.symbol + ': calibration of the shocks (PIT)',
      xlabel: 'u = F(z) under the ' + s.law + ' law', ylabel: 'bin count \u00f7 expected',
      x: [0, 1], y: [0, ymax], legend: [{ label: 'histogram of u (' + P.n + ' bars)', color: COLORS.bar, type: 'box' },
        { label: 'uniform, 95 % band', color: COLORS.ref, dash: '5 3' }], clip: 'clip-u' + idx });
    el('rect', { x: f.sx(0), y: f.sy(1 + half), width: f.sx(1) - f.sx(0), height: f.sy(Math.max(0, 1 - half)) - f.sy(1 + half), fill: COLORS.bandFill }, f.plot);
    rel.forEach(function (v, i) {
      var x0 = f.sx(i / B), x1 = f.sx((i + 1) / B);
      var r = el('rect', { x: x0 + 0.5, y: f.sy(v), width: Math.max(0.5, x1 - x0 - 1), height: f.bottom - f.sy(v), fill: COLORS.bar, 'class': 'pit-bin' }, f.plot);
      el('title', {}, r).textContent = 'u in [' + fmt(i / B) + ', ' + fmt((i + 1) / B) + '): ' + P.counts[i] + ' bars (' + fmt(e) + ' expected)';
    });
    el('line', { x1: f.sx(0), x2: f.sx(1), y1: f.sy(1), y2: f.sy(1), stroke: COLORS.ref, 'stroke-width': 1.3, 'stroke-dasharray': '5 3' }, f.plot);
    var t = 'chi-square ' + fmt(P.chi2) + ' (' + P.dof + ' df), p = ' + fmt(P.chi2_p) + '; KS D = ' + fmt(P.ks_d) + ', p = ' + fmt(P.ks_p);
    txt(f.svg, f.sx(0) + 6, f.top + 14, t, 'label pit-test');
  }

  function todChart(host, s, idx) {
    var T = s.tod, G = T.segments, fig = figure(host, 'half');
    var vals = [];
    G.forEach(function (g) { vals.push(g.mean_z2, g.ratio); });
    var ymax = Math.max(1.5, extent([vals])[1]) * 1.08;
    var f = frame(fig, { w: 640, h: 420, title: s.symbol + ': shocks and exceptions by time of day',
      xlabel: 'first bar of each segment of the session (' + T.session_bars + ' bars a session)', ylabel: 'ratio to what the model expects',
      x: [0, G.length], y: [0, ymax], legend: [{ label: 'mean z\u00b2', color: COLORS.vol, type: 'box' },
        { label: 'exceptions \u00f7 expected @' + s.var_level, color: COLORS.vr, type: 'box' }], clip: 'clip-t' + idx, noXTicks: true });
    var w = (f.sx(1) - f.sx(0)) / 2 - 3;
    G.forEach(function (g, i) {
      var x0 = f.sx(i) + 2;
      [[g.mean_z2, COLORS.vol, 'mean z\u00b2 ' + fmt(g.mean_z2) + ' over ' + g.n + ' bars'],
       [g.ratio, COLORS.vr, g.exceptions + ' exceptions, ' + fmt(g.expected) + ' expected']].forEach(function (b, k) {
        if (b[0] === null || !isFinite(b[0])) return;
        var r = el('rect', { x: x0 + k * (w + 1), y: f.sy(b[0]), width: Math.max(0.5, w), height: f.bottom - f.sy(b[0]), fill: b[1], 'class': 'tod-bar' }, f.plot);
        el('title', {}, r).textContent = 'bars ' + g.bars + ': ' + b[2];
      });
      txt(f.svg, f.sx(i + 0.5), f.bottom + 15, String(g.bars).split('\u2013')[0], 'tick', { 'text-anchor': 'middle' });
    });
    el('line', { x1: f.sx(0), x2: f.sx(G.length), y1: f.sy(1), y2: f.sy(1), stroke: COLORS.ink, 'stroke-width': 1.2, 'stroke-dasharray': '5 3' }, f.plot);
  }

  function paramChart(host, s, idx) {
    var fig = figure(host, 'wide');
    var cap = document.createElement('figcaption');
    cap.textContent = s.symbol + ': parameter estimates across accepted refits';
    fig.appendChild(cap);
    var box = document.createElement('div');
    box.className = 'panels';
    fig.appendChild(box);
    s.params.forEach(function (p, j) {
      var xs = p.points.map(function (q) { return q[0]; });
      var ys = p.points.map(function (q) { return q[1]; });
      var up = p.points.map(function (q) { return q[1] !== null && q[2] !== null ? q[1] + 1.96 * q[2] : null; });
      var dn = p.points.map(function (q) { return q[1] !== null && q[2] !== null ? q[1] - 1.96 * q[2] : null; });
      var f = frame(box, { w: 420, h: 250, title: p.name, xlabel: s.time_axis ? 'refit time (UTC)' : 'refit bar index',
        ylabel: p.name + ' (model units)', xtime: s.time_axis, x: pad(xRange(xs), 0.06), y: pad(extent([ys, up, dn]), 0.08),
        legend: [{ label: 'estimate', color: COLORS.param }, { label: '\u00b11.96 s.e.', color: COLORS.band }],
        clip: 'clip-p' + idx + '-' + j });
      p.points.forEach(function (q, i) {
        if (up[i] === null) return;
        el('line', { x1: f.sx(q[0]), x2: f.sx(q[0]), y1: f.sy(up[i]), y2: f.sy(dn[i]), stroke: COLORS.band, 'stroke-width': 1.5 }, f.plot);
      });
      el('path', { d: pathOf(xs, ys, f.sx, f.sy), fill: 'none', stroke: COLORS.param, 'stroke-width': 1.6 }, f.plot);
      p.points.forEach(function (q) {
        if (q[1] === null) return;
        el('circle', { cx: f.sx(q[0]), cy: f.sy(q[1]), r: 3, fill: COLORS.param }, f.plot);
      });
    });
  }

  function attempt(fn, host, s, idx) {
    try { fn(host, s, idx); rendered += 1; }
    catch (e) { console.error('chart failed for ' + s.symbol + ': ' + (e && e.stack ? e.stack : e)); }
  }

  var hosts = document.querySelectorAll('.charts[data-symbol-index]');
  for (var h = 0; h < hosts.length; ++h) {
    var host = hosts[h], idx = +host.getAttribute('data-symbol-index'), s = data.symbols[idx];
    if (!s) continue;
    attempt(lossChart, host, s, idx);
    attempt(volChart, host, s, idx);
    attempt(pitChart, host, s, idx);
    if (s.tod) attempt(todChart, host, s, idx);
    if (s.params) attempt(paramChart, host, s, idx);
  }

  // Sortable overview: numbers by data-v, text otherwise; click again to reverse.
  var table = document.getElementById('overview');
  if (table) {
    var heads = table.tHead.rows[0].cells;
    Array.prototype.forEach.call(heads, function (th, col) {
      th.addEventListener('click', function () {
        var asc = !th.classList.contains('asc');
        Array.prototype.forEach.call(heads, function (o) { o.classList.remove('asc', 'desc'); });
        th.classList.add(asc ? 'asc' : 'desc');
        var num = th.getAttribute('data-type') === 'num';
        var body = table.tBodies[0], rows = Array.prototype.slice.call(body.rows);
        function key(r) {
          var c = r.cells[col], v = c ? (c.getAttribute('data-v') !== null ? c.getAttribute('data-v') : c.textContent) : '';
          if (!num) return v.toLowerCase();
          var x = parseFloat(v);
          return isNaN(x) ? null : x;
        }
        rows.sort(function (a, b) {
          var x = key(a), y = key(b);
          if (x === y) return 0;
          if (x === null) return 1;
          if (y === null) return -1;
          return (x < y ? -1 : 1) * (asc ? 1 : -1);
        });
        rows.forEach(function (r) { body.appendChild(r); });
      });
    });
  }

  var status = document.getElementById('report-status');
  status.setAttribute('data-charts-rendered', String(rendered));
  if (window.__reportFlush) window.__reportFlush();
})();
)JS";

}  // namespace aftershock
