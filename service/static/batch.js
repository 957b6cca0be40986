// One sweep: progress with rate and time left, scatter of a summary against a varied value,
// histograms of each summary, statistics, a sortable member table and the failed members.
(function () {
  'use strict';
  const { api, download, esc, num, duration, stateBadge, problemText } = window.SL;
  const P = window.SLPlots;
  const batchId = decodeURIComponent(location.pathname.split('/').pop());
  const ACTIVE = new Set(['queued', 'running']);
  const MAX_ROWS = 300;
  const view = { scx: 'lin', scy: 'lin' };
  let batch = null, table = null, charts = { hists: [] }, sort = { col: 'index', dir: 1 }, lastTableAt = 0;

  const $ = id => document.getElementById(id);

  function showBatch() {
    const p = batch.progress || {};
    document.title = 'Stifflane · ' + (batch.label || batch.id);
    $('title').textContent = batch.label || 'untitled';
    $('batchid').textContent = batch.id;
    $('state').innerHTML = stateBadge(batch.state);
    $('cancel').classList.toggle('hidden', !ACTIVE.has(batch.state) || batch.cancel_requested);
    $('progress-bar').style.width = (100 * (p.fraction || 0)).toFixed(1) + '%';
    $('progress-text').textContent = `${num(p.succeeded + p.failed)} of ${num(p.total)} members done — ` +
      `${num(p.succeeded)} succeeded, ${num(p.failed)} failed` + (p.cancelled ? `, ${num(p.cancelled)} cancelled` : '');
    $('rate').textContent = (p.members_per_second ? num(p.members_per_second, 3) + ' members/s' : '') +
      (ACTIVE.has(batch.state) && p.eta_seconds != null ? ' · about ' + duration(p.eta_seconds) + ' left' : '');
  }

  async function poll() {
    if (window.SL.paused()) { setTimeout(poll, 1000); return; }
    const resp = await api('/v1/batches/' + encodeURIComponent(batchId));
    if (resp.status === 429 || resp.status >= 500) { setTimeout(poll, 2000); return; }
    if (!resp.ok) { $('notices').innerHTML = `<div class="notice bad">${esc(await problemText(resp))}</div>`; return; }
    batch = await resp.json();
    showBatch();
    const active = ACTIVE.has(batch.state);
    if (!active || Date.now() - lastTableAt > 4000) await loadTable();
    if (active) setTimeout(poll, 1500);
  }

  async function loadTable() {
    lastTableAt = Date.now();
    const [t, s] = await Promise.all([api(`/v1/batches/${encodeURIComponent(batchId)}/table`),
                                     api(`/v1/batches/${encodeURIComponent(batchId)}/statistics`)]);
    if (t.ok) { table = (await t.json()).columns; fillSelects(); drawScatter(); drawHists(); drawMembers(); drawFailed(); }
    if (s.ok) drawStats(await s.json());
  }

  function valueNames() { return Object.keys(table.values || {}); }
  function summaryNames() { return Object.keys(table.summaries || {}); }
  function col(name) { return name === 'index' ? table.index : (table.values[name] || table.summaries[name] || table[name]); }

  function fillSelects() {
    const fill = (sel, names) => {
      const keep = sel.value;
      if (sel.options.length !== names.length) sel.innerHTML = names.map(n => `<option>${esc(n)}</option>`).join('');
      if (names.includes(keep)) sel.value = keep;
    };
    fill($('scatter-y'), summaryNames());
    fill($('scatter-x'), valueNames().length ? valueNames() : ['index']);
  }

  function drawScatter() {
    P.destroy(charts.scatter);
    const xn = $('scatter-x').value, yn = $('scatter-y').value;
    if (!table || !table.index.length || !yn) return;
    const ok = table.outcome.map(o => o === 'succeeded');
    const xs = col(xn), ys = col(yn);
    const pts = xs.map((x, i) => [x, ok[i] ? ys[i] : null]).filter(p => p[0] != null).sort((a, b) => a[0] - b[0]);
    charts.scatter = P.lineChart($('scatter'), { x: pts.map(p => p[0]), xlog: view.scx === 'log', ylog: view.scy === 'log',
      series: [{ label: yn, values: pts.map(p => p[1]), color: P.PALETTE[0], points: true, scatter: true }],
      height: 360, xlabel: xn, ylabel: yn, pad: 0.04 });
  }

  function histogram(values) {
    const v = values.filter(x => x != null && isFinite(x));
    if (!v.length) return null;
    let lo = Math.min(...v), hi = Math.max(...v);
    if (lo === hi) { lo -= 0.5 * (Math.abs(lo) || 1); hi += 0.5 * (Math.abs(hi) || 1); }
    const bins = Math.max(5, Math.min(40, Math.ceil(Math.sqrt(v.length))));
    const w = (hi - lo) / bins, counts = new Array(bins).fill(0);
    for (const x of v) counts[Math.min(bins - 1, Math.floor((x - lo) / w))]++;
    return { centers: counts.map((_, k) => lo + (k + 0.5) * w), counts, n: v.length };
  }

  function drawHists() {
    charts.hists.forEach(P.destroy);
    charts.hists = [];
    const names = summaryNames(), el = $('hists');
    const ok = table.outcome.map(o => o === 'succeeded');
    el.innerHTML = names.map((n, k) => `<div class="h"><b>${esc(n)}</b><div id="hist-${k}"></div></div>`).join('');
    names.forEach((n, k) => {
      const h = histogram(col(n).filter((_, i) => ok[i]));
      const box = $('hist-' + k);
      if (!h) { box.innerHTML = '<div class="empty">no finite values</div>'; return; }
      charts.hists.push(P.barChart(box, { x: h.centers, y: h.counts, label: 'members', xlabel: n, height: 170,
        color: P.PALETTE[(k + 1) % P.PALETTE.length] }));
    });
  }

  function drawStats(stats) {
    const rows = Object.entries(stats.summaries || {});
    if (!rows.length) return;
    $('stats').innerHTML = `<div class="scroll-x"><table class="data compact"><thead><tr><th>summary</th>
      <th class="num">mean ± std</th><th class="num">5% – 95%</th></tr></thead><tbody>` + rows.map(([n, s]) =>
      `<tr><td class="mono">${esc(n)}</td><td class="num">${num(s.mean, 3)}<br><span class="muted">± ${num(s.std, 2)}</span></td>
      <td class="num">${num(s.q05, 3)}<br><span class="muted">${num(s.q95, 3)}</span></td></tr>`).join('') + '</tbody></table></div>' +
      `<p class="muted">${num(stats.rows)} members finished; ` +
      Object.entries(stats.outcomes || {}).map(([o, c]) => `${esc(o)} ${num(c)}`).join(', ') + '</p>';
  }

  function drawMembers() {
    const cols = ['index', ...valueNames(), ...summaryNames(), 'outcome'];
    $('members').querySelector('thead').innerHTML = '<tr>' + cols.map(c => {
      const cls = 'sortable' + (c !== 'outcome' ? ' num' : '') + (sort.col === c ? (sort.dir > 0 ? ' sorted-asc' : ' sorted-desc') : '');
      return `<th class="${cls}" data-col="${esc(c)}">${esc(c)}</th>`;
    }).join('') + '</tr>';
    $('members').querySelectorAll('th').forEach(th => th.onclick = () => {
      sort = { col: th.dataset.col, dir: sort.col === th.dataset.col ? -sort.dir : 1 };
      drawMembers();
    });
    let idx = table.index.map((_, i) => i);
    if ($('only-failed').checked) idx = idx.filter(i => table.outcome[i] !== 'succeeded');
    const key = col(sort.col);
    idx.sort((a, b) => {
      const va = key[a], vb = key[b];
      if (va == null) return 1;
      if (vb == null) return -1;
      return (va < vb ? -1 : va > vb ? 1 : 0) * sort.dir;
    });
    const shown = idx.slice(0, MAX_ROWS);
    $('members').querySelector('tbody').innerHTML = shown.map(i => '<tr>' + cols.map(c => c === 'outcome'
      ? `<td class="${table.outcome[i] === 'succeeded' ? '' : 'bad'}" title="${esc(table.message[i] || '')}">${esc(table.outcome[i])}</td>`
      : `<td class="num">${num(col(c)[i])}</td>`).join('') + '</tr>').join('');
    $('rows-note').textContent = idx.length > MAX_ROWS ? ` showing ${MAX_ROWS} of ${idx.length} rows (download the table for all)` : ` ${idx.length} rows`;
  }

  function drawFailed() {
    const bad = table.index.map((m, i) => [m, table.outcome[i], table.message[i]]).filter(r => r[1] !== 'succeeded');
    if (!bad.length) return;
    $('failed').innerHTML = '<ul class="problems">' + bad.slice(0, 100).map(([m, o, msg]) =>
      `<li><b>member ${esc(m)}</b> ${esc(o)}<div>${esc(msg || '')}</div></li>`).join('') + '</ul>' +
      (bad.length > 100 ? `<p class="muted">and ${bad.length - 100} more</p>` : '');
  }

  async function loadSpec() {
    const resp = await api(`/v1/batches/${encodeURIComponent(batchId)}/spec`);
    if (resp.ok) $('spec').textContent = JSON.stringify(await resp.json(), null, 2);
  }

  function setup() {
    document.querySelectorAll('.seg').forEach(seg => {
      const axis = seg.dataset.axis;
      const paint = () => seg.querySelectorAll('button').forEach(b => b.classList.toggle('on', b.dataset.v === view[axis]));
      paint();
      seg.querySelectorAll('button').forEach(b => b.onclick = () => { view[axis] = b.dataset.v; paint(); if (table) drawScatter(); });
    });
    $('scatter-x').onchange = $('scatter-y').onchange = drawScatter;
    $('only-failed').onchange = () => table && drawMembers();
    document.querySelectorAll('#downloads button').forEach(b => b.onclick = () =>
      download(`/v1/batches/${encodeURIComponent(batchId)}/table?format=${b.dataset.fmt}`, `${batchId}.${b.dataset.fmt}`));
    $('cancel').onclick = async () => {
      const resp = await api(`/v1/batches/${encodeURIComponent(batchId)}/cancel`, { method: 'POST' });
      if (!resp.ok) alert(await problemText(resp));
    };
  }

  window.SLBatch = { charts: () => charts, table: () => table };
  document.addEventListener('DOMContentLoaded', () => { setup(); poll(); loadSpec(); });
})();
