// Shared helpers of every dashboard page: authorised fetch, formatting, the sign-in dialog.
(function () {
  'use strict';
  const KEY = 'stifflane.key';  // sessionStorage only: the key lives for this browser session

  function key() { return sessionStorage.getItem(KEY) || ''; }
  let pausedUntil = 0;  // after a 429, background polls wait for the server's Retry-After
  function paused() { return Date.now() < pausedUntil; }

  async function api(path, opts = {}) {
    const headers = Object.assign({}, opts.headers || {});
    if (key()) headers['Authorization'] = 'Bearer ' + key();
    if (opts.json !== undefined) { headers['Content-Type'] = 'application/json'; opts.body = JSON.stringify(opts.json); }
    const resp = await fetch(path, { method: opts.method || 'GET', headers, body: opts.body, cache: 'no-store' });
    if (resp.status === 429) pausedUntil = Date.now() + 1000 * (Number(resp.headers.get('Retry-After')) || 5);
    if (resp.status === 401) { sessionStorage.setItem(KEY + '.needed', '1'); signIn(key() ? 'The key was refused (unknown or revoked).' : 'This server needs an API key.'); }
    return resp;
  }

  async function problemText(resp) {
    try {
      const p = await resp.json();
      return (p.title || resp.status) + (p.detail ? ': ' + p.detail : '');
    } catch (e) { return 'HTTP ' + resp.status; }
  }

  // Download a result with the Authorization header (a plain link could not send it).
  async function download(path, filename) {
    const resp = await api(path);
    if (!resp.ok) { alert(await problemText(resp)); return; }
    const url = URL.createObjectURL(await resp.blob());
    const a = document.createElement('a');
    a.href = url; a.download = filename; document.body.appendChild(a); a.click(); a.remove();
    setTimeout(() => URL.revokeObjectURL(url), 10000);
  }

  function esc(s) {
    return String(s == null ? '' : s).replace(/[&<>"']/g, c => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' }[c]));
  }

  function num(v, digits = 4) {
    if (v == null || v === '') return '—';
    if (typeof v !== 'number') return esc(v);
    if (v === 0) return '0';
    const a = Math.abs(v);
    if (Number.isInteger(v) && a < 1e9) return v.toLocaleString('en-US');
    if (a >= 1e5 || a < 1e-3) return v.toExponential(digits - 1);
    return String(+v.toPrecision(digits));
  }

  function duration(seconds) {
    if (seconds == null || !isFinite(seconds)) return '—';
    if (seconds < 1e-3) return (seconds * 1e6).toFixed(0) + ' µs';
    if (seconds < 1) return (seconds * 1000).toFixed(seconds < 0.01 ? 1 : 0) + ' ms';
    if (seconds < 60) return seconds.toFixed(1) + ' s';
    const m = Math.floor(seconds / 60), s = Math.round(seconds % 60);
    if (m < 60) return m + ' min ' + s + ' s';
    return Math.floor(m / 60) + ' h ' + (m % 60) + ' min';
  }

  function elapsed(job) {
    if (!job.started_at) return null;
    const end = job.finished_at ? Date.parse(job.finished_at) : Date.now();
    return (end - Date.parse(job.started_at)) / 1000;
  }

  function stateBadge(state) { return `<span class="state ${esc(state)}">${esc(state)}</span>`; }

  function signIn(reason) {
    const dlg = document.getElementById('signin');
    if (!dlg || dlg.open) return;
    dlg.querySelector('.reason').textContent = reason || '';
    dlg.querySelector('input').value = '';
    dlg.showModal();
  }

  function setupHeader() {
    const who = document.querySelector('header.top .who');
    if (who) {
      who.innerHTML = key()
        ? `<span>key ${esc(key().slice(0, 12))}…</span><button type="button" id="signout">Forget key</button>`
        : sessionStorage.getItem(KEY + '.needed') ? `<button type="button" id="signinbtn">Sign in with a key</button>` : '';
      const out = document.getElementById('signout');
      if (out) out.onclick = () => { sessionStorage.removeItem(KEY); location.reload(); };
      const inb = document.getElementById('signinbtn');
      if (inb) inb.onclick = () => signIn('');
    }
    const dlg = document.getElementById('signin');
    if (dlg) {
      dlg.querySelector('form').addEventListener('submit', ev => {
        const v = dlg.querySelector('input').value.trim();
        if (ev.submitter && ev.submitter.value === 'cancel') return;
        if (v) { sessionStorage.setItem(KEY, v); location.reload(); }
      });
    }
  }

  // The pages' Content-Security-Policy forbids style attributes; markup built by the scripts
  // carries data-w (a bar's width in %) and data-bg (a colour) instead, applied here through
  // the style object, which the policy allows.
  function paint(root) {
    if (!root.querySelectorAll) return;
    const els = Array.from(root.querySelectorAll('[data-w],[data-bg]'));
    if (root.matches && root.matches('[data-w],[data-bg]')) els.push(root);
    for (const el of els) {
      if (el.dataset.w !== undefined) el.style.width = el.dataset.w + '%';
      if (el.dataset.bg !== undefined) el.style.background = el.dataset.bg;
    }
  }
  new MutationObserver(records => records.forEach(r => r.addedNodes.forEach(paint)))
    .observe(document.documentElement, { childList: true, subtree: true });

  window.SL = { api, paused, download, esc, num, duration, elapsed, stateBadge, problemText, key };
  document.addEventListener('DOMContentLoaded', setupHeader);
})();
