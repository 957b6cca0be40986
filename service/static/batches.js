// Sweeps list: every batch with its progress, rate and time left; re-read every few seconds.
(function () {
  'use strict';
  const { api, esc, num, duration, stateBadge } = window.SL;

  function row(b) {
    const p = b.progress || {};
    const pct = (100 * (p.fraction || 0)).toFixed(1);
    return `<tr data-id="${esc(b.id)}">
      <td><a href="/batches/${encodeURIComponent(b.id)}">${esc(b.label || 'untitled')}</a><div class="muted mono">${esc(b.id)}</div></td>
      <td>${stateBadge(b.state)}</td>
      <td><div class="bar" title="${pct}%"><i data-w="${pct}"></i></div></td>
      <td class="num">${num(p.total)}</td><td class="num">${num(p.failed)}</td>
      <td class="num">${p.members_per_second ? num(p.members_per_second, 3) + '/s' : '—'}</td>
      <td class="num">${['queued', 'running'].includes(b.state) ? duration(p.eta_seconds) : '—'}</td>
      <td>${esc(new Date(b.created_at).toLocaleString())}</td></tr>`;
  }

  async function refresh() {
    const resp = await api('/v1/batches?limit=100');
    if (!resp.ok) return;
    const items = (await resp.json()).items || [];
    document.querySelector('#batches tbody').innerHTML = items.map(row).join('');
    document.getElementById('none').classList.toggle('hidden', items.length > 0);
  }

  document.addEventListener('DOMContentLoaded', () => { refresh(); setInterval(refresh, 3000); });
})();
