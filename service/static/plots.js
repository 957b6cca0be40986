// Chart helpers over the vendored uPlot: log/linear axes, thinning, method bands, markers.
(function () {
  'use strict';
  const PALETTE = ['#0e7a6a', '#3a78c9', '#d0582b', '#8a4fbf', '#c79a1d', '#c2417a', '#2f9c4f',
                   '#5b6478', '#1aa3b8', '#9b5b2c', '#6a7fdb', '#b33a3a'];
  const METHOD_COLORS = { dormand_prince_54: '#e7a13a', radau_iia_5: '#3a78c9', rosenbrock_4: '#8a4fbf', bdf: '#3a9a6a' };
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

  // Columns ready for uPlot: rows with t <= 0 dropped on a log time axis, values <= 0 blanked on a log value axis.
  function prepare(x, cols, xlog, ylog) {
    let idx = [];
    for (let i = 0; i < x.length; i++) if (x[i] != null && (!xlog || x[i] > 0)) idx.push(i);
    const sub = a => idx.map(i => a[i]);
    let xs = sub(x), ys = cols.map(sub);
    const keep = thin(xs.length, ys, MAX_POINTS);
    if (keep) { xs = keep.map(i => xs[i]); ys = ys.map(c => keep.map(i => c[i])); }
    if (ylog) ys = ys.map(c => c.map(v => (v != null && v > 0 ? v : null)));
    return [xs, ...ys];
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

  function markersPlugin(markers) {
    return { hooks: { draw: [u => {
      if (!markers || !markers.length) return;
      const { ctx, bbox } = u;
      ctx.save();
      ctx.setLineDash([4, 3]);
      ctx.lineWidth = 1.5 * devicePixelRatio;
      ctx.font = `${11 * devicePixelRatio}px system-ui, sans-serif`;
      for (const m of markers) {
        const x = u.valToPos(m.t, 'x', true);
        if (!isFinite(x) || x < bbox.left || x > bbox.left + bbox.width) continue;
        ctx.strokeStyle = METHOD_COLORS[m.to] || '#444';
        ctx.beginPath(); ctx.moveTo(x, bbox.top); ctx.lineTo(x, bbox.top + bbox.height); ctx.stroke();
        ctx.fillStyle = ctx.strokeStyle;
        ctx.fillText('▸ ' + (m.label || ''), x + 3 * devicePixelRatio, bbox.top + 12 * devicePixelRatio);
      }
      ctx.restore();
    }] } };
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

  // opts: {x, series: [{label, values, color, dash, width}], xlog, ylog, height, xlabel, ylabel, bands, markers}
  function lineChart(el, opts) {
    el.innerHTML = '';
    const data = prepare(opts.x, opts.series.map(s => s.values), opts.xlog, opts.ylog);
    const width = Math.max(300, el.clientWidth || 600);
    const uopts = {
      width, height: opts.height || 320,
      scales: { x: { time: false, distr: opts.xlog ? 3 : 1, log: 10, range: opts.pad && !opts.xlog ? padded(opts.pad) : undefined },
                y: { distr: opts.ylog ? 3 : 1, log: 10 } },
      axes: [
        { label: opts.xlabel || 't', values: (u, vals) => vals.map(fmtTick), size: 44 },
        { label: opts.ylabel || '', values: (u, vals) => vals.map(fmtTick), size: 64 },
      ],
      series: [{ label: opts.xlabel || 't', value: (u, v) => fmtTick(v) }].concat(opts.series.map((s, i) => ({
        label: s.label, stroke: s.color || PALETTE[i % PALETTE.length], width: s.width || 1.6,
        dash: s.dash, spanGaps: false, points: { show: s.points || false, size: s.scatter ? 6 : 4, fill: s.scatter ? (s.color || PALETTE[i % PALETTE.length]) : undefined },
        paths: s.scatter ? () => null : undefined,
        value: (u, v) => fmtTick(v),
      }))),
      legend: { show: opts.legend !== false },
      cursor: { drag: { x: true, y: false } },
      plugins: [bandsPlugin(opts.bands), markersPlugin(opts.markers)],
    };
    const chart = new uPlot(uopts, data, el);
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
      axes: [{ values: (u, vals) => vals.map(fmtTick), size: 34 }, { size: 40 }],
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

  window.SLPlots = { lineChart, barChart, destroy, methodBands, PALETTE, METHOD_COLORS, prepare, thin };
})();
