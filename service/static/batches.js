// Sweeps list: every batch with its progress, rate and time left; re-read every few seconds.
(function () {
  'use strict';
  const { api, esc, num, duration, stateBadge } = window.SL;

  function row(b) {
    const p = b.progress || {};
    const total = p.total || 0, w = n => (total ? (100 * (n || 0) / total).toFixed(2) : '0');
    const segs = [['ok', p.succeeded], ['fail', p.failed], ['lost', p.lost], ['cancel', p.cancelled]]
      .filter(([, n]) => n > 0).map(([cls, n]) => `<i class="${cls}" data-w="${w(n)}"></i>`).join('');
    const run = (p.succeeded || 0) + (p.failed || 0) + (p.lost || 0);
    const title = `${run} of ${total} run: ${p.succeeded || 0} succeeded, ${p.failed || 0} failed` +
      (p.lost ? `, ${p.lost} lost` : '') + (p.cancelled ? `, ${p.cancelled} cancelled` : '');
    return `<tr data-id="${esc(b.id)}">
      <td><a href="/batches/${encodeURIComponent(b.id)}">${esc(b.label || 'untitled')}</a><div class="muted mono">${esc(b.id)}</div></td>
      <td>${stateBadge(b.state)}</td>
      <td><div class="bar segs" title="${esc(title)}">${segs}</div></td>
      <td class="num">${num(p.total)}</td><td class="num">${num((p.failed || 0) + (p.lost || 0))}</td>
      <td class="num">${num(p.cancelled || 0)}</td>
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
