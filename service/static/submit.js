// New run: edit a spec, have the server check it as you type, submit it.
(function () {
  'use strict';
  const { api, esc } = window.SL;
  const J = window.SLJson;
  let seq = 0, timer = null, valid = false, errLines = new Map();

  const $ = id => document.getElementById(id);

  function uuid4() {
    const b = crypto.getRandomValues(new Uint8Array(16));
    b[6] = (b[6] & 0x0f) | 0x40; b[8] = (b[8] & 0x3f) | 0x80;
    const h = Array.from(b, x => x.toString(16).padStart(2, '0')).join('');
    return `${h.slice(0, 8)}-${h.slice(8, 12)}-${h.slice(12, 16)}-${h.slice(16, 20)}-${h.slice(20)}`;
  }

  function paintGutter() {
    const n = $('spec').value.split('\n').length;
    const out = [];
    for (let k = 1; k <= n; k++) out.push(errLines.has(k) ? `<span class="err" title="${esc(errLines.get(k))}">${k}</span>` : String(k));
    $('gutter').innerHTML = out.join('\n');
    $('gutter').scrollTop = $('spec').scrollTop;
  }

  function goToLine(line) {
    const ta = $('spec'), lines = ta.value.split('\n');
    let off = 0;
    for (let k = 0; k < line - 1 && k < lines.length; k++) off += lines[k].length + 1;
    ta.focus();
    ta.setSelectionRange(off, off + (lines[line - 1] || '').length);
    ta.scrollTop = Math.max(0, (line - 5) * 18);
    paintGutter();
  }

  function showProblems(list, summaryHtml) {
    errLines = new Map();
    for (const p of list) errLines.set(p.line, (errLines.has(p.line) ? errLines.get(p.line) + '; ' : '') + p.detail);
    $('problems').innerHTML = list.map(p => `<li data-line="${p.line}"><b>line ${p.line}</b> ` +
      `<span class="mono">${esc(p.pointer || '')}</span><div>${esc(p.detail)}</div></li>`).join('');
    $('problems').querySelectorAll('li').forEach(li => li.onclick = () => goToLine(Number(li.dataset.line)));
    $('summary').innerHTML = summaryHtml || '';
    paintGutter();
  }

  function setState(text, ok) {
    $('check-state').textContent = text;
    $('check-state').style.color = ok === true ? 'var(--accent)' : ok === false ? 'var(--bad)' : '';
    valid = ok === true;
    $('submit').disabled = !valid;
  }

  async function check() {
    const text = $('spec').value, mine = ++seq;
    if (!text.trim()) { setState('empty'); showProblems([], 'Nothing checked yet.'); return; }
    let body;
    try { body = JSON.parse(text); } catch (e) {
      setState('not valid JSON', false);
      showProblems([{ line: J.syntaxErrorLine(text, e), pointer: '', detail: e.message }]);
      return;
    }
    setState('checking…');
    const resp = await api('/v1/spec-checks', { method: 'POST', json: body });
    if (mine !== seq) return;  // a newer edit is being checked
    if (resp.ok) {
      const out = await resp.json(), m = out.model || {}, c = m.counts || {};
      setState('valid', true);
      showProblems([], `<div class="notice ok">Valid: ${esc(m.title || 'model')} — ${c.states} states, ` +
        `${c.parameters} parameters, ${c.reactions} reactions, ${c.events} events, ` +
        `${(m.conservation_laws || []).length} conservation laws.</div>`);
      return;
    }
    let problem = {};
    try { problem = await resp.json(); } catch (e) { /* not JSON */ }
    const map = J.locate(text);
    const errs = (problem.errors && problem.errors.length) ? problem.errors
      : [{ pointer: '', detail: (problem.title || resp.status) + (problem.detail ? ': ' + problem.detail : '') }];
    const list = errs.map(e => ({ pointer: e.pointer, detail: e.detail, line: J.lineForPointer(text, map, e.pointer || '', e.detail) }));
    list.sort((a, b) => a.line - b.line);
    setState(`${list.length} problem${list.length === 1 ? '' : 's'}`, false);
    showProblems(list, `<span class="muted">${esc(problem.title || '')}</span>`);
  }

  function scheduleCheck() { clearTimeout(timer); timer = setTimeout(check, 400); paintGutter(); }

  async function loadExample() {
    const resp = await fetch('/ui/examples/tarnwhistle_demo.json', { cache: 'no-store' });
    if (!resp.ok) { setState('the demo spec is not installed on this server', false); return; }
    $('spec').value = await resp.text();
    scheduleCheck();
  }

  async function submit() {
    let body;
    try { body = JSON.parse($('spec').value); } catch (e) { return; }
    $('submit').disabled = true;
    $('submit-msg').textContent = 'submitting…';
    const key = uuid4();  // one per submit; a retry of this click reuses it
    let resp;
    for (let attempt = 0; attempt < 4; attempt++) {
      resp = await api('/v1/jobs', { method: 'POST', json: body, headers: { 'Idempotency-Key': key } });
      if (![409, 429, 503].includes(resp.status)) break;
      const wait = Number(resp.headers.get('Retry-After')) || 1;
      await new Promise(r => setTimeout(r, 1000 * Math.min(wait, 10)));
    }
    if (resp.status === 202 || resp.status === 201 || resp.status === 200) {
      const created = await resp.json();
      location.href = '/jobs/' + encodeURIComponent(created.id);
      return;
    }
    $('submit-msg').textContent = await window.SL.problemText(resp);
    $('submit').disabled = false;
  }

  document.addEventListener('DOMContentLoaded', () => {
    const ta = $('spec');
    ta.addEventListener('input', scheduleCheck);
    ta.addEventListener('scroll', () => { $('gutter').scrollTop = ta.scrollTop; });
    ta.addEventListener('keydown', e => {
      if (e.key === 'Tab') { e.preventDefault(); document.execCommand('insertText', false, '  '); }
    });
    $('example').onclick = loadExample;
    $('format').onclick = () => { try { ta.value = JSON.stringify(JSON.parse(ta.value), null, 2); scheduleCheck(); } catch (e) { /* leave it */ } };
    $('file').onchange = async () => { const f = $('file').files[0]; if (f) { ta.value = await f.text(); scheduleCheck(); } };
    $('submit').onclick = submit;
    if (new URLSearchParams(location.search).get('example')) loadExample();
    paintGutter();
  });
})();
