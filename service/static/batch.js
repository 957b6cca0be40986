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

  // Members by how they ended: run (succeeded, failed, lost) and never run (cancelled).
  function counts(p) {
    const total = p.total || 0, ok = p.succeeded || 0, failed = p.failed || 0, lost = p.lost || 0, cancelled = p.cancelled || 0;
    const left = p.remaining != null ? p.remaining : Math.max(0, total - ok - failed - lost - cancelled);
    return { total, ok, failed, lost, cancelled, left, run: ok + failed + lost };
  }

  // The progress bar in segments: succeeded, failed, lost, cancelled; what is left stays empty.
  function segments(c) {
    const w = n => (c.total ? (100 * n / c.total).toFixed(2) : '0');
    return [['ok', c.ok], ['fail', c.failed], ['lost', c.lost], ['cancel', c.cancelled]]
      .filter(([, n]) => n > 0).map(([cls, n]) => `<i class="${cls}" data-w="${w(n)}" title="${num(n)} ${cls}"></i>`).join('');
  }

  function showBatch() {
    const p = batch.progress || {}, c = counts(p), active = ACTIVE.has(batch.state);
    const title = batch.label;
    document.title = 'Stifflane · ' + (title || batch.id);
    $('title').textContent = title || 'untitled';
    $('batchid').textContent = batch.id;
    $('state').innerHTML = stateBadge(batch.state);
    $('cancel').classList.toggle('hidden', !active || batch.cancel_requested);
    $('progress-bar').innerHTML = segments(c);
    $('progress-text').textContent = `${num(c.run)} of ${num(c.total)} members run — ${num(c.ok)} succeeded, ${num(c.failed)} failed` +
      (c.lost ? `, ${num(c.lost)} lost` : '') + (c.cancelled ? `; ${num(c.cancelled)} cancelled (never ran)` : '') +
      (active || c.left ? `; ${num(c.left)} left` : '');
    $('seg-legend').innerHTML = [['ok', 'succeeded', c.ok], ['fail', 'failed', c.failed], ['lost', 'lost', c.lost],
      ['cancel', 'cancelled', c.cancelled], ['left', 'left', c.left]].filter(([, , n]) => n > 0)
      .map(([cls, what, n]) => `<span><i class="${cls}"></i>${esc(what)} ${num(n)}</span>`).join('');
    $('rate').textContent = (p.members_per_second ? num(p.members_per_second, 3) + ' members/s' : '') +
      (active && p.eta_seconds != null ? ' · about ' + duration(p.eta_seconds) + ' left' : '');
    const bad = c.failed + c.lost;
    $('notices').innerHTML = bad && c.run ? `<div class="notice bad">${num(bad)} of ${num(c.run)} members that ran ` +
      `(${num(100 * bad / c.run, 3)}%) failed: they are the red crosses along the foot of the scatter plot, ` +
      `and listed with their messages below.</div>` : '';
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

  // A member that ran and did not succeed (cancelled members never ran; expired rows are unknown).
  function failedAt(i) { return !['succeeded', 'cancelled', 'expired'].includes(table.outcome[i]); }

  function drawScatter() {
    P.destroy(charts.scatter);
    charts.scatter = null;
    const xn = $('scatter-x').value, yn = $('scatter-y').value;
    if (!table || !table.index.length || !yn) return;
    const xs = col(xn), ys = col(yn);
    const pts = [], rug = [];
    xs.forEach((x, i) => {
      if (x == null) return;
      if (table.outcome[i] === 'succeeded') pts.push([x, ys[i]]);
      else if (failedAt(i)) {
        if (ys[i] != null) pts.push([x, null, ys[i]]);  // a failed member with a value: its own series
        else { rug.push(x); pts.push([x, null]); }   // none: a cross on the foot, in the x range
      }
    });
    pts.sort((a, b) => a[0] - b[0]);
    const failedPts = pts.filter(p => p.length === 3).length;
    if (!pts.some(p => p[1] != null || p[2] != null)) { $('scatter').innerHTML = '<div class="empty">No member has a value for this summary yet.</div>'; }
    const series = [{ label: yn, values: pts.map(p => p[1]), color: P.PALETTE[0], points: true, scatter: true }];
    if (failedPts) series.push({ label: 'failed members', values: pts.map(p => (p.length === 3 ? p[2] : null)),
      color: '#a3243b', points: true, scatter: true });
    else charts.scatter = P.lineChart($('scatter'), { x: pts.map(p => p[0]), xlog: view.scx === 'log', ylog: view.scy === 'log',
      series, height: 360, xlabel: xn, ylabel: yn, pad: 0.04, rug });
    const nFail = table.outcome.filter((_, i) => failedAt(i)).length;
    $('scatter-note').textContent = nFail ? `× ${num(nFail)} failed member${nFail === 1 ? '' : 's'}` +
      (rug.length ? `: ${num(rug.length)} without a value for ${yn}, marked by red crosses along the foot of the plot at their ${xn}` : '') +
      (failedPts ? `; ${num(failedPts)} with a value, drawn in red` : '') + '.' : '';
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
    const nFail = table.outcome.filter((_, i) => failedAt(i)).length;
    $('hists-note').textContent = nFail ? `Counts of the members that succeeded; ${num(nFail)} failed member${nFail === 1 ? '' : 's'} not counted.` : '';
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
    if ($('only-failed').checked) idx = idx.filter(failedAt);
    const key = col(sort.col);
    idx.sort((a, b) => {
      const va = key[a], vb = key[b];
      if (va == null) return 1;
      if (vb == null) return -1;
      return (va < vb ? -1 : va > vb ? 1 : 0) * sort.dir;
    });
    const shown = idx.slice(0, MAX_ROWS);
    $('members').querySelector('tbody').innerHTML = shown.map(i => '<tr>' + cols.map(c => c === 'outcome'
      ? `<td class="${failedAt(i) ? 'bad' : table.outcome[i] === 'succeeded' ? '' : 'muted'}" title="${esc(table.message[i] || '')}">${esc(table.outcome[i])}</td>`
      : `<td class="num">${num(col(c)[i])}</td>`).join('') + '</tr>').join('');
    $('rows-note').textContent = idx.length > MAX_ROWS ? ` showing ${MAX_ROWS} of ${idx.length} rows (download the table for all)` : ` ${idx.length} rows`;
  }

  function drawFailed() {
    const bad = table.index.map((m, i) => [m, table.outcome[i], table.message[i], i]).filter(r => failedAt(r[3]));
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
