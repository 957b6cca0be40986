// Run board: the job list. The list is re-read every few seconds; each active job is
// polled on its own with If-None-Match, so an unchanged job costs a 304.
(function () {
  'use strict';
  const { api, esc, num, duration, elapsed, stateBadge } = window.SL;
  const jobs = new Map();      // id -> view
  const etags = new Map();     // id -> ETag
  const polledAt = new Map();  // id -> time of the last poll
  let order = [];              // ids, newest first
  let cursor = null;
  const ACTIVE = new Set(['queued', 'running']);

  function owner(j) { return j.owner || (j.links && j.links.owner) || '—'; }

  function row(j) {
    const pct = (100 * (j.progress || 0)).toFixed(1);
    const outcome = j.state === 'succeeded' ? '<span class="muted">' + esc(j.message || '') + '</span>'
      : esc(j.message || (j.cancel_requested ? 'cancel requested' : ''));
    return `<tr data-id="${esc(j.id)}">
      <td><a href="/jobs/${encodeURIComponent(j.id)}">${esc(j.label || 'untitled')}</a><div class="muted mono">${esc(j.id)}</div></td>
      <td>${stateBadge(j.state)}</td>
      <td><div class="bar" title="${pct}%"><i data-w="${pct}"></i></div></td>
      <td class="num">${duration(elapsed(j))}</td>
      <td>${esc(owner(j))}</td>
      <td>${esc(j.method || '')}</td>
      <td>${esc(new Date(j.created_at).toLocaleString())}</td>
      <td>${outcome}</td></tr>`;
  }

  function visible(j) {
    const st = document.getElementById('f-state').value;
    const q = document.getElementById('f-text').value.trim().toLowerCase();
    if (st && j.state !== st) return false;
    return !q || [j.label, j.id, j.method, owner(j)].some(v => String(v || '').toLowerCase().includes(q));
  }

  function render() {
    const shown = order.map(id => jobs.get(id)).filter(visible);
    document.querySelector('#jobs tbody').innerHTML = shown.map(row).join('');
    document.getElementById('none').classList.toggle('hidden', shown.length > 0);
    document.getElementById('more').classList.toggle('hidden', !cursor);
  }

  // reset: a new filter (start over); next: a cursor (append); neither: refresh the first page
  async function loadPage(next, reset) {
    const st = document.getElementById('f-state').value;
    const params = new URLSearchParams({ limit: '50' });
    if (st) params.set('state', st);
    if (next) params.set('cursor', next);
    const resp = await api('/v1/jobs?' + params);
    if (!resp.ok) { document.getElementById('live').textContent = 'cannot list jobs (' + resp.status + ')'; return; }
    const page = await resp.json();
    if (reset) { order = []; cursor = null; }
    const fresh = [];
    for (const j of page.items) {
      jobs.set(j.id, j);
      if (!order.includes(j.id)) (next || reset ? order : fresh).push(j.id);
    }
    order = fresh.concat(order);
    if (next || reset || !cursor) cursor = page.next_cursor || null;
    render();
    document.getElementById('live').textContent = 'updated ' + new Date().toLocaleTimeString();
  }

  async function pollActive() {
    if (window.SL.paused()) return;
    // a few jobs per tick, oldest poll first: stays far below the per-key rate limit
    const active = order.map(id => jobs.get(id)).filter(j => j && ACTIVE.has(j.state))
      .sort((a, b) => (polledAt.get(a.id) || 0) - (polledAt.get(b.id) || 0)).slice(0, 5);
    active.forEach(j => polledAt.set(j.id, Date.now()));
    let changed = false;
    await Promise.all(active.map(async j => {
      const headers = etags.has(j.id) ? { 'If-None-Match': etags.get(j.id) } : {};
      const resp = await api('/v1/jobs/' + encodeURIComponent(j.id), { headers });
      if (resp.status === 200) {
        etags.set(j.id, resp.headers.get('ETag'));
        jobs.set(j.id, await resp.json());
        changed = true;
      }
    }));
    if (changed || active.length) render();  // elapsed time ticks too
  }

  document.addEventListener('DOMContentLoaded', () => {
    document.getElementById('f-state').onchange = () => loadPage(null, true);
    document.getElementById('f-text').oninput = render;
    document.getElementById('more').onclick = () => loadPage(cursor);
    loadPage(null, true);
    setInterval(pollActive, 1500);
    setInterval(() => { if (!window.SL.paused()) loadPage(null, false); }, 5000);  // pick up new jobs
  });
})();
