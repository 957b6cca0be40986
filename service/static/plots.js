// Chart helpers over the vendored uPlot: log/linear axes, thinning, method bands, switch and
// event markers, the unsolved part of a partial run, failed points as a rug.
(function () {
  'use strict';
  const PALETTE = ['#0e7a6a', '#3a78c9', '#d0582b', '#8a4fbf', '#c79a1d', '#c2417a', '#2f9c4f',
                   '#5b6478', '#1aa3b8', '#9b5b2c', '#6a7fdb', '#b33a3a'];
  const METHOD_COLORS = { dormand_prince_54: '#e7a13a', radau_iia_5: '#3a78c9', rosenbrock_4: '#8a4fbf', bdf: '#3a9a6a' };
  const IMPLICIT = new Set(['radau_iia_5', 'rosenbrock_4', 'bdf']);
  const MAX_POINTS = 6000;   // drawn per series; the full data stays in the downloads

  // Indices to draw: per bucket the first point plus each series' min and max (keeps spikes).
  function thin(n, cols, maxPts) {
    if (n <= maxPts) return null;
    const buckets = Math.max(1, Math.floor(maxPts / (1 + 2 * Math.max(1, cols.length))));
    const size = n / buckets, keep = new Set([0, n - 1]);
    for (let b = 0; b < buckets; b++) {
      const lo = Math.floor(b * size), hi = Math.min(n, Math.floor((b + 1) * size));
      keep.add(lo);
      for (const c of cols) {
        let iMin = -1, iMax = -1;
        for (let i = lo; i < hi; i++) {
          const v = c[i];
          if (v == null) continue;
          if (iMin < 0 || v < c[iMin]) iMin = i;
          if (iMax < 0 || v > c[iMax]) iMax = i;
        }
        if (iMin >= 0) { keep.add(iMin); keep.add(iMax); }
      }
    }
    return Array.from(keep).sort((a, b) => a - b);
  }

  // Values below this are left off a log axis like values <= 0: the decade below them would
  // underflow to 0 (denormals) and the axis could not be drawn.
  const LOG_FLOOR = 1e-300;

  // Columns ready for uPlot, and what was left out: rows with t <= 0 dropped on a log time axis,
  // values <= 0 (and non-finite ones) blanked on a log value axis. hidden[k] counts the values
  // of series k (among the rows drawn) that a log value axis cannot show.
  function prepareInfo(x, cols, xlog, ylog) {
    const idx = [];
    for (let i = 0; i < x.length; i++) if (x[i] != null && isFinite(x[i]) && (!xlog || x[i] > 0)) idx.push(i);
    const sub = a => idx.map(i => (a[i] == null || !isFinite(a[i]) ? null : a[i]));
    let xs = idx.map(i => x[i]), ys = cols.map(sub);
    const hidden = ys.map(c => (ylog ? c.reduce((n, v) => n + (v != null && !(v >= LOG_FLOOR) ? 1 : 0), 0) : 0));
    const droppedRows = x.length - idx.length;
    const keep = thin(xs.length, ys, MAX_POINTS);
    if (keep) { xs = keep.map(i => xs[i]); ys = ys.map(c => keep.map(i => c[i])); }
    if (ylog) ys = ys.map(c => c.map(v => (v != null && v >= LOG_FLOOR ? v : null)));
    return { data: [xs, ...ys], hidden, droppedRows };
  }

  function prepare(x, cols, xlog, ylog) { return prepareInfo(x, cols, xlog, ylog).data; }

  // A log scale's range, whole decades around the data (uPlot's own log ranging and ticks fail
  // with "Invalid array length" once the data span more than about 20 decades).
  function logRange(u, lo, hi) {
    if (lo == null || hi == null || !(lo > 0) || !(hi > 0)) return [1, 10];
    let a = Math.floor(Math.log10(lo)), b = Math.ceil(Math.log10(hi));
    if (b <= a) { a -= 1; b += 1; }
    return [Math.pow(10, Math.max(a, -300)), Math.pow(10, Math.min(b, 300))];
  }

  // Ticks of a log axis: every decade (every k-th when there are many), with 2 and 5 in
  // between when the axis spans few decades.
  function logSplits(u, axisIdx, min, max) {
    if (!(min > 0) || !(max > 0)) return [];
    const a = Math.floor(Math.log10(min) + 1e-9), b = Math.ceil(Math.log10(max) - 1e-9);
    const decades = Math.max(1, b - a);
    const px = (axisIdx === 0 ? u.bbox.width : u.bbox.height) / devicePixelRatio;
    const room = Math.max(2, Math.floor(px / (axisIdx === 0 ? 60 : 28)));
    const every = Math.max(1, Math.ceil(decades / room));
    const out = [];
    for (let k = Math.ceil(a / every) * every; k <= b; k += every) {
      const d = Math.pow(10, k);
      const mults = decades * 3 <= room ? [1, 2, 5] : [1];
      for (const m of mults) { const v = m * d; if (v >= min * (1 - 1e-12) && v <= max * (1 + 1e-12)) out.push(v); }
    }
    return out;
  }

  // Labels of a linear axis with as many digits as it takes for each label to read as its tick
  // (to a millionth of the tick spacing), so neighbours never share a label.
  function distinctLabels(vals) {
    const finite = vals.filter(v => v != null && isFinite(v));
    let incr = Infinity;
    for (let i = 1; i < finite.length; i++) incr = Math.min(incr, Math.abs(finite[i] - finite[i - 1]) || Infinity);
    const scaleOf = Math.max(...finite.map(Math.abs), 0);
    if (!isFinite(incr)) incr = scaleOf || 1;
    const big = scaleOf >= 1e5 || (scaleOf > 0 && scaleOf < 1e-3);
    const fmt = (v, p) => (v == null ? '' : Math.abs(v) < incr * 1e-9 ? '0'
      : big ? v.toExponential(p - 1).replace('e+', 'e') : String(+v.toPrecision(p)));
    for (let p = 1; p <= 15; p++) {
      const labels = vals.map(v => fmt(v, p));
      if (vals.every((v, i) => v == null || !isFinite(v) || Math.abs(Number(labels[i].replace(/e(\d)/, 'e+$1')) - v) <= incr * 1e-6)) return labels;
    }
    return vals.map(v => fmt(v, 15));
  }

  // A value under the cursor: at least 4 significant digits.
  function fmtValue(v) {
    if (v == null || !isFinite(v)) return '—';
    if (v === 0) return '0';
    const a = Math.abs(v);
    if (a >= 1e5 || a < 1e-3) return v.toExponential(3).replace('e+', 'e');
    return v.toPrecision(4);
  }

  // Time under the cursor: 6 significant digits (trailing zeros dropped).
  function fmtTime(v) {
    if (v == null || !isFinite(v)) return '—';
    const a = Math.abs(v);
    if (a !== 0 && (a >= 1e6 || a < 1e-3)) return v.toExponential(5).replace('e+', 'e');
    return String(+v.toPrecision(6));
  }

  function bandsPlugin(bands) {
    return { hooks: { drawClear: [u => {
      if (!bands || !bands.length) return;
      const { ctx, bbox } = u;
      ctx.save();
      ctx.globalAlpha = 0.16;
      for (const b of bands) {
        let x0 = u.valToPos(b.from, 'x', true), x1 = u.valToPos(b.to, 'x', true);
        if (!isFinite(x0)) x0 = bbox.left;
        if (!isFinite(x1)) x1 = bbox.left + bbox.width;
        x0 = Math.max(bbox.left, x0); x1 = Math.min(bbox.left + bbox.width, x1);
        if (x1 <= x0) continue;
        ctx.fillStyle = METHOD_COLORS[b.method] || '#999';
        ctx.fillRect(x0, bbox.top, x1 - x0, bbox.height);
      }
      ctx.restore();
    }] } };
  }

  // Method switches: dashed lines labelled with the method switched to. Labels are drawn inside
  // the plot, left-aligned (right-aligned near the right edge), one row lower when they would
  // overlap the previous one; their boxes are kept on the chart (_markerBoxes) for tests.
  function markersPlugin(markers) {
    return { hooks: { draw: [u => {
      u._markerBoxes = [];
      if (!markers || !markers.length) return;
      const { ctx, bbox } = u, dpr = devicePixelRatio, fs = 11 * dpr, pad = 4 * dpr;
      ctx.save();
      ctx.setLineDash([4, 3]);
      ctx.lineWidth = 1.5 * dpr;
      ctx.font = `${fs}px system-ui, sans-serif`;
      ctx.textBaseline = 'top';
      const rows = [];  // right end of the last label in each row
      for (const m of markers) {
        const x = u.valToPos(m.t, 'x', true);
        if (!isFinite(x) || x < bbox.left || x > bbox.left + bbox.width) continue;
        ctx.strokeStyle = METHOD_COLORS[m.to] || '#444';
        ctx.beginPath(); ctx.moveTo(x, bbox.top); ctx.lineTo(x, bbox.top + bbox.height); ctx.stroke();
        const text = '▸ ' + (m.label || '');
        const w = ctx.measureText(text).width;
        let x0 = x + pad;
        if (x0 + w > bbox.left + bbox.width) x0 = x - pad - w;
        x0 = Math.max(bbox.left + pad, x0);
        let row = 0;
        while (row < rows.length && rows[row] > x0 - pad) row++;
        rows[row] = x0 + w;
        const y0 = bbox.top + pad + row * (fs + 3 * dpr);
        ctx.fillStyle = 'rgba(255,255,255,0.85)';
        ctx.fillRect(x0 - 2 * dpr, y0 - dpr, w + 4 * dpr, fs + 2 * dpr);
        ctx.fillStyle = ctx.strokeStyle;
        ctx.textAlign = 'left';
        ctx.fillText(text, x0, y0);
        u._markerBoxes.push({ left: x0 / dpr, top: y0 / dpr, right: (x0 + w) / dpr, bottom: (y0 + fs) / dpr,
                              plot: { left: bbox.left / dpr, top: bbox.top / dpr, right: (bbox.left + bbox.width) / dpr,
                                      bottom: (bbox.top + bbox.height) / dpr } });
      }
      ctx.restore();
    }] } };
  }

  // Events: a thin dotted line and a diamond at the foot of the plot for each event time.
  function eventsPlugin(events) {
    return { hooks: { draw: [u => {
      u._eventMarks = [];
      if (!events || !events.length) return;
      const { ctx, bbox } = u, dpr = devicePixelRatio, r = 4 * dpr;
      ctx.save();
      ctx.setLineDash([2, 3]);
      ctx.lineWidth = dpr;
      ctx.strokeStyle = ctx.fillStyle = '#b4541a';
      const foot = bbox.top + bbox.height;
      for (const ev of events) {
        const x = u.valToPos(ev.t, 'x', true);
        if (!isFinite(x) || x < bbox.left - 0.5 || x > bbox.left + bbox.width + 0.5) continue;
        ctx.beginPath(); ctx.moveTo(x, bbox.top); ctx.lineTo(x, foot); ctx.stroke();
        ctx.beginPath(); ctx.moveTo(x, foot - 2 * r); ctx.lineTo(x + r, foot - r); ctx.lineTo(x, foot); ctx.lineTo(x - r, foot - r);
        ctx.closePath(); ctx.fill();
        u._eventMarks.push({ t: ev.t, name: ev.name, x: x / dpr });
      }
      ctx.restore();
    }] } };
  }

  // The part of the span a partial result did not reach: hatched grey from t_reached on.
  function unsolvedPlugin(from) {
    return { hooks: { drawClear: [u => {
      if (from == null) return;
      const { ctx, bbox } = u;
      let x0 = u.valToPos(from, 'x', true);
      if (!isFinite(x0)) return;
      x0 = Math.max(bbox.left, x0);
      const x1 = bbox.left + bbox.width;
      if (x1 <= x0) return;
      ctx.save();
      ctx.fillStyle = 'rgba(104, 113, 133, 0.12)';
      ctx.fillRect(x0, bbox.top, x1 - x0, bbox.height);
      ctx.restore();
    }] } };
  }

  // Points that have no y value (failed sweep members): a red cross each along the foot of the plot.
  function rugPlugin(xs, color) {
    return { hooks: { draw: [u => {
      u._rug = [];
      if (!xs || !xs.length) return;
      const { ctx, bbox } = u, dpr = devicePixelRatio, r = 3.5 * dpr;
      const y = bbox.top + bbox.height - r - 2 * dpr;
      ctx.save();
      ctx.strokeStyle = color || '#a3243b';
      ctx.lineWidth = 1.6 * dpr;
      for (const v of xs) {
        const x = u.valToPos(v, 'x', true);
        if (!isFinite(x) || x < bbox.left - r || x > bbox.left + bbox.width + r) continue;
        ctx.beginPath(); ctx.moveTo(x - r, y - r); ctx.lineTo(x + r, y + r); ctx.moveTo(x + r, y - r); ctx.lineTo(x - r, y + r); ctx.stroke();
        u._rug.push(v);
      }
      ctx.restore();
    }] } };
  }

  // Legend values appear on hover only: before it, the legend lists the series (no empty values).
  function idleLegendPlugin() {
    const mark = u => u.root.classList.toggle('idle', u.cursor.idx == null);
    return { hooks: { ready: [mark], setCursor: [mark] } };
  }

  // A linear range with a margin, so points on the extremes are not cut by the plot's edge.
  function padded(frac) {
    return (u, lo, hi) => {
      if (lo == null || hi == null) return [0, 1];
      const span = hi - lo || Math.abs(hi) || 1;
      return [lo - frac * span, hi + frac * span];
    };
  }

  function fmtTick(v) {
    if (v == null) return '';
    const a = Math.abs(v);
    if (a !== 0 && (a >= 1e5 || a < 1e-3)) return v.toExponential(0).replace('e+', 'e');
    return String(+v.toPrecision(6));
  }

  function axisValues(log) {
    return log ? (u, vals) => vals.map(fmtTick) : (u, vals) => distinctLabels(vals);
  }

  // An axis: our own ticks and labels on a log scale (every tick labelled), distinct labels on a linear one.
  function axis(base, log) {
    return Object.assign(base, { values: axisValues(log) }, log ? { splits: logSplits, filter: (u, splits) => splits } : {});
  }

  function scale(log, range) {
    return log ? { distr: 3, log: 10, range: logRange } : { distr: 1, range };
  }

  // opts: {x, series: [{label, values, color, dash, width, unit}], xlog, ylog, height, xlabel, ylabel,
  //        bands, markers, events, xrange: [lo, hi], unsolvedFrom, rug, sync}
  // The chart keeps what a log value axis left out: chart._hidden = [{label, count}].
  function lineChart(el, opts) {
    el.innerHTML = '';
    const info = prepareInfo(opts.x, opts.series.map(s => s.values), opts.xlog, opts.ylog);
    const data = info.data;
    const width = Math.max(300, el.clientWidth || 600);
    let xrange = opts.pad && !opts.xlog ? padded(opts.pad) : undefined;
    if (opts.xrange && !opts.xlog) xrange = () => opts.xrange.slice();
    else if (opts.xrange && opts.xlog && opts.xrange[1] > 0)
      xrange = (u, lo, hi) => logRange(u, lo, Math.max(hi || 0, opts.xrange[1]));
    const xs = scale(opts.xlog, xrange), ys = scale(opts.ylog);
    if (opts.xlog && xrange) xs.range = xrange;
    const uopts = {
      width, height: opts.height || 320,
      scales: { x: Object.assign({ time: false }, xs), y: ys },
      axes: [
        axis({ label: opts.xlabel || 't', size: 44 }, opts.xlog),
        axis({ label: opts.ylabel || '', size: 70 }, opts.ylog),
      ],
      series: [{ label: opts.xlabel || 't', value: (u, v) => fmtTime(v) }].concat(opts.series.map((s, i) => {
        const n = info.hidden[i];
        const label = s.label + (s.unit ? ` [${s.unit}]` : '') + (n ? ` (${n} value${n === 1 ? '' : 's'} <= 0 hidden)` : '');
        return {
          label, stroke: s.color || PALETTE[i % PALETTE.length], width: s.width || 1.6,
          dash: s.dash, spanGaps: false, points: { show: s.points || false, size: s.scatter ? 6 : 4, fill: s.scatter ? (s.color || PALETTE[i % PALETTE.length]) : undefined },
          paths: s.scatter ? () => null : undefined,
          value: (u, v) => fmtValue(v),
        };
      })),
      legend: { show: opts.legend !== false },
      cursor: { drag: { x: true, y: false }, sync: opts.sync ? { key: opts.sync } : undefined },
      plugins: [bandsPlugin(opts.bands), unsolvedPlugin(opts.unsolvedFrom), markersPlugin(opts.markers),
                eventsPlugin(opts.events), rugPlugin(opts.rug), idleLegendPlugin()],
    };
    const chart = new uPlot(uopts, data, el);
    chart._hidden = opts.series.map((s, i) => ({ label: s.label, count: info.hidden[i] })).filter(h => h.count);
    const ro = new ResizeObserver(() => {
      const w = Math.max(300, el.clientWidth);
      if (Math.abs(w - chart.width) > 2) chart.setSize({ width: w, height: uopts.height });
    });
    ro.observe(el);
    chart._ro = ro;
    return chart;
  }

  // A histogram: bars at the bin centres.
  function barChart(el, opts) {
    el.innerHTML = '';
    const width = Math.max(240, el.clientWidth || 300);
    const uopts = {
      width, height: opts.height || 180, legend: { show: false }, cursor: { show: false },
      scales: { x: { time: false, range: (u, lo, hi) => { const pad = (opts.x.length > 1 ? opts.x[1] - opts.x[0] : 1) / 2; return [lo - pad, hi + pad]; } },
                y: { range: (u, lo, hi) => [0, Math.max(1, hi) * 1.08] } },
      axes: [{ values: (u, vals) => distinctLabels(vals), size: 34 }, { size: 40, values: (u, vals) => distinctLabels(vals) }],
      series: [{}, { label: opts.label || 'count', fill: (opts.color || PALETTE[0]) + '99', stroke: opts.color || PALETTE[0],
                     width: 1, paths: uPlot.paths.bars({ size: [0.92, 80] }), points: { show: false } }],
    };
    const chart = new uPlot(uopts, [opts.x, opts.y], el);
    const ro = new ResizeObserver(() => {
      const w = Math.max(240, el.clientWidth);
      if (Math.abs(w - chart.width) > 2) chart.setSize({ width: w, height: uopts.height });
    });
    ro.observe(el);
    chart._ro = ro;
    return chart;
  }

  function destroy(chart) { if (chart) { if (chart._ro) chart._ro.disconnect(); chart.destroy(); } }

  // Runs of one method in a step history: [{from, to, method}].
  function methodBands(history, tEnd) {
    const out = [];
    if (!history || !history.t || !history.t.length) return out;
    let start = 0;
    for (let i = 1; i <= history.t.length; i++) {
      if (i === history.t.length || history.method[i] !== history.method[start]) {
        const to = i < history.t.length ? history.t[i] : (tEnd != null ? tEnd : history.t[i - 1]);
        // a step is drawn from where it starts: t[k] - h[k]
        const from = history.t[start] - (history.h[start] || 0);
        out.push({ from: start === 0 ? from : out[out.length - 1].to, to, method: history.method[start] });
        start = i;
      }
    }
    return out;
  }

  window.SLPlots = { lineChart, barChart, destroy, methodBands, PALETTE, METHOD_COLORS, IMPLICIT, prepare, prepareInfo, thin,
                     fmtValue, fmtTime, distinctLabels, logSplits };
})();
