// One job: live progress, trajectories, the stiffness report drawn, downloads, the spec.
(function () {
  'use strict';
  const { api, download, esc, num, duration, elapsed, stateBadge, problemText } = window.SL;
  const P = window.SLPlots;
  const jobId = decodeURIComponent(location.pathname.split('/').pop());
  const ACTIVE = new Set(['queued', 'running']);
  const view = { tx: 'lin', ty: 'lin', sx: 'lin' };
  let job = null, etag = null, result = null, charts = {}, picked = null;

  function kv(rows) {
    return rows.filter(r => r[1] !== undefined).map(([k, v]) => `<tr><td>${esc(k)}</td><td>${v}</td></tr>`).join('');
  }

  function showJob() {
    document.title = 'Stifflane · ' + (job.label || job.id);
    document.getElementById('title').textContent = job.label || 'untitled';
    document.getElementById('jobid').textContent = job.id;
    document.getElementById('state').innerHTML = stateBadge(job.state);
    const active = ACTIVE.has(job.state);
    document.getElementById('cancel').classList.toggle('hidden', !active || job.cancel_requested);
    document.getElementById('downloads').classList.toggle('hidden', job.state !== 'succeeded');
    document.getElementById('progress-card').classList.toggle('hidden', !active);
    const pct = 100 * (job.progress || 0);
    document.getElementById('progress-bar').style.width = pct.toFixed(1) + '%';
    document.getElementById('progress-text').textContent =
      (job.state === 'queued' ? 'queued, waiting for a worker' : 'integrating') + ` — ${pct.toFixed(1)}% of the span`;
    document.getElementById('elapsed').textContent = job.started_at ? 'elapsed ' + duration(elapsed(job)) : '';
    const out = document.getElementById('outcome');
    if (!active && job.state !== 'succeeded') {
      document.querySelector('#waiting .empty').textContent = 'This run ended without a result: ' + (job.message || job.state);
    }
    if (!active) {
      const cls = job.state === 'succeeded' ? 'ok' : 'bad';
      out.innerHTML = `<div class="notice ${cls}"><b>${esc(job.outcome || job.state)}</b> — ${esc(job.message || '')}</div>`;
    } else out.innerHTML = job.cancel_requested ? '<div class="notice">cancel requested…</div>' : '';
    const d = job.digest || {};
    document.getElementById('run-facts').innerHTML = kv([
      ['state', stateBadge(job.state)], ['outcome', esc(job.outcome || '—')], ['method asked', esc(job.method)],
      ['methods used', esc((d.methods_used || []).join(', ') || '—')], ['reached t', num(d.t_reached)],
      ['submitted', esc(new Date(job.created_at).toLocaleString())], ['wall time', duration(elapsed(job))],
      ['solver time', duration(d.solve_seconds)], ['model evaluated by', tier(d.machine_code)],
      ['attempt', num(job.attempt)],
      job.owner ? ['owner', esc(job.owner)] : ['owner', undefined],
    ]);
  }

  // how the worker evaluated the model's right-hand side (engine.native)
  function tier(mc) {
    if (!mc) return '—';
    if (mc.used) return `machine code (${duration(mc.seconds)} to build or load)`;
    return `interpreter <span class="sub">(${esc(mc.reason || '')})</span>`;
  }

  async function poll() {
    if (window.SL.paused()) { setTimeout(poll, 1000); return; }
    const headers = etag ? { 'If-None-Match': etag } : {};
    const resp = await api('/v1/jobs/' + encodeURIComponent(jobId), { headers });
    if (resp.status === 200) {
      etag = resp.headers.get('ETag');
      job = await resp.json();
      showJob();
      if (job.state === 'succeeded' && !result) await loadResult();
    } else if (resp.status === 429 || resp.status >= 500) {
      setTimeout(poll, 2000);  // busy or restarting: try again
      return;
    } else if (resp.status !== 304) {
      document.getElementById('outcome').innerHTML = `<div class="notice bad">${esc(await problemText(resp))}</div>`;
      return;
    }
    if (!job || ACTIVE.has(job.state)) setTimeout(poll, 1000);
  }

  async function loadResult() {
    const resp = await api(`/v1/jobs/${encodeURIComponent(jobId)}/result`);
    if (!resp.ok) return;
    result = await resp.json();
    document.getElementById('waiting').classList.add('hidden');
    document.getElementById('result-area').classList.remove('hidden');
    document.querySelectorAll('.result-only').forEach(e => e.classList.remove('hidden'));
    buildPicker();
    drawAll();
    showReport();
  }

  function names() {
    return { states: Object.keys(result.states || {}), derived: Object.keys(result.derived || {}) };
  }

  function buildPicker() {
    const { states, derived } = names();
    picked = new Set(states);
    const all = states.map(n => ['state', n]).concat(derived.map(n => ['derived', n]));
    document.getElementById('pick').innerHTML = all.map(([kind, n], i) =>
      `<label title="${kind}"><input type="checkbox" value="${esc(n)}" ${picked.has(n) ? 'checked' : ''}>` +
      `<span class="swatch" data-bg="${P.PALETTE[i % P.PALETTE.length]}"></span>${esc(n)}` +
      `${kind === 'derived' ? ' <span class="muted">(derived)</span>' : ''}</label>`).join('');
    document.querySelectorAll('#pick input').forEach(cb => cb.onchange = () => {
      cb.checked ? picked.add(cb.value) : picked.delete(cb.value);
      drawTrajectories();
    });
  }

  function column(name) { return (result.states || {})[name] || (result.derived || {})[name]; }

  function switchMarkers() {
    const sw = (result.report || {}).switches || [];
    return sw.map(s => ({ t: s.t, to: s.to, label: s.to }));
  }

  function drawTrajectories() {
    P.destroy(charts.traj);
    const { states, derived } = names();
    const all = states.concat(derived);
    const series = all.map((n, i) => ({ n, i })).filter(o => picked.has(o.n)).map(o => ({
      label: o.n, values: column(o.n), color: P.PALETTE[o.i % P.PALETTE.length] }));
    const el = document.getElementById('traj');
    if (!series.length) { el.innerHTML = '<div class="empty">Pick a state or derived quantity above.</div>'; charts.traj = null; return; }
    charts.traj = P.lineChart(el, { x: result.times, series, xlog: view.tx === 'log', ylog: view.ty === 'log',
      height: 380, xlabel: 't', markers: switchMarkers() });
  }

  function drawSteps() {
    P.destroy(charts.steps);
    const rep = result.report || {}, hist = rep.step_history;
    const el = document.getElementById('steps');
    if (!hist || !hist.t || !hist.t.length) { charts.steps = null; return; }
    const tEnd = rep.t_reached;
    const series = [{ label: 'step taken h', values: hist.h, color: '#1b2230', width: 1.8 }];
    if ((hist.explicit_step || []).some(v => v != null))
      series.push({ label: 'explicit stability limit', values: hist.explicit_step, color: '#d0582b', dash: [6, 4] });
    charts.steps = P.lineChart(el, { x: hist.t, series, xlog: view.sx === 'log', ylog: true, height: 300,
      xlabel: 't', ylabel: 'step size', bands: P.methodBands(hist, tEnd), markers: switchMarkers() });
    const used = Array.from(new Set(hist.method));
    document.getElementById('method-legend').innerHTML = used.map(m =>
      `<span><i data-bg="${P.METHOD_COLORS[m] || '#999'}"></i>${esc(m)} phase</span>`).join('') +
      '<span class="muted">dashed vertical lines: method switches</span>';
    const need = rep.explicit_steps_needed, took = rep.accepted_steps;
    document.getElementById('steps-note').textContent = need != null
      ? `An explicit method alone would have needed about ${num(Math.ceil(need))} steps for this span; the run took ${num(took)} accepted steps.`
      : '';
  }

  function drawStiffness() {
    P.destroy(charts.stiff);
    const samples = (result.report || {}).stiffness_samples || [];
    const el = document.getElementById('stiff');
    if (!samples.length) { charts.stiff = null; return; }
    const series = [{ label: 'spectral radius', values: samples.map(s => s.spectral_radius), points: true }];
    if (samples.some(s => s.stiffness_ratio != null))
      series.push({ label: 'stiffness ratio', values: samples.map(s => s.stiffness_ratio), points: true, color: '#8a4fbf' });
    charts.stiff = P.lineChart(el, { x: samples.map(s => s.t), series, xlog: view.tx === 'log', ylog: true,
      height: 240, xlabel: 't' });
    const withEig = samples.filter(s => s.dominant_eigenvalues && s.dominant_eigenvalues.length);
    document.getElementById('eig-box').classList.toggle('hidden', !withEig.length);
    const lam = ([re, im]) => num(re, 3) + (im ? (im > 0 ? ' + ' : ' − ') + num(Math.abs(im), 3) + 'i' : '');
    document.getElementById('eig').innerHTML = '<table class="data compact"><thead><tr><th class="num">t</th>' +
      '<th>largest in magnitude</th><th class="num">explicit step</th></tr></thead><tbody>' +
      withEig.map(s => `<tr><td class="num">${num(s.t)}</td><td class="mono">${s.dominant_eigenvalues.map(lam).join(', ')}</td>` +
        `<td class="num">${num(s.explicit_step)}</td></tr>`).join('') + '</tbody></table>';
  }

  // Drift of each conservation law c·y(t) relative to its start, scaled like the engine's report.
  function drawDrift() {
    P.destroy(charts.drift);
    const laws = ((result.model || {}).conservation_laws) || [];
    const el = document.getElementById('drift');
    if (!laws.length) { charts.drift = null; return; }
    const st = names().states.map(column);
    const n = result.times.length;
    const series = laws.map((law, k) => {
      const c = law.coefficients;
      const dot = i => c.reduce((acc, ci, j) => acc + ci * (st[j][i] || 0), 0);
      const c0 = dot(0);
      const scale = Math.max(Math.abs(c0), c.reduce((a, ci, j) => a + Math.abs(ci * (st[j][0] || 0)), 0)) || 1;
      const values = [];
      for (let i = 0; i < n; i++) values.push(Math.abs(dot(i) - c0) / scale);
      return { label: law.label || 'law ' + (k + 1), values, color: P.PALETTE[(k + 2) % P.PALETTE.length] };
    });
    charts.drift = P.lineChart(el, { x: result.times, series, xlog: view.tx === 'log', ylog: true, height: 240,
      xlabel: 't', ylabel: 'relative drift' });
  }

  function drawAll() { drawTrajectories(); drawSteps(); drawStiffness(); drawDrift(); }

  function showReport() {
    const r = result.report || {};
    const per = r.steps_per_method || {}, secs = r.seconds_per_method || {};
    const methods = Object.keys(per).filter(m => per[m]);
    document.getElementById('counters').innerHTML = kv([
      ['accepted steps', num(r.accepted_steps)], ['rejected steps', num(r.rejected_steps)],
      ['right-hand-side evaluations', num(r.rhs_evaluations)], ['Jacobian evaluations', num(r.jacobian_evaluations)],
      ['LU factorisations', num(r.lu_factorizations)], ['Newton iterations', num(r.newton_iterations)],
      ['Newton failures', num(r.newton_failures)], ['events found', num(r.events_found)],
      ['method switches', num(r.switch_count)], ['explicit steps needed (estimate)', r.explicit_steps_needed == null ? '—' : num(Math.ceil(r.explicit_steps_needed))],
      ['conservation drift (max)', num(r.conservation_drift)],
    ].concat(methods.map(m => [`steps / time in ${m}`, `${num(per[m])} / ${duration(secs[m])}`])));
    const sw = r.switches || [];
    if (sw.length) document.getElementById('switches').innerHTML = `<table class="data"><thead><tr>
      <th class="num">t</th><th>from</th><th>to</th><th class="num">step h</th><th class="num">spectral radius</th>
      <th class="num">explicit step</th><th>reason</th></tr></thead><tbody>` + sw.map(s => `<tr>
      <td class="num">${num(s.t)}</td><td>${esc(s.from)}</td><td>${esc(s.to)}</td><td class="num">${num(s.h)}</td>
      <td class="num">${num(s.rho)}</td><td class="num">${num(s.explicit_step != null ? s.explicit_step : s.h_stability)}</td>
      <td>${esc(s.reason)}</td></tr>`).join('') + '</tbody></table>';
    const warn = r.warnings || [];
    if (warn.length) document.getElementById('outcome').insertAdjacentHTML('beforeend',
      warn.map(w => `<div class="notice">${esc(w)}</div>`).join(''));
    if (result.caution) document.getElementById('outcome').insertAdjacentHTML('beforeend',
      `<div class="notice">${esc(result.caution)}</div>`);
    const m = result.model || {}, c = m.counts || {};
    document.getElementById('model-facts').innerHTML = kv([
      ['title', esc(m.title || '—')], ['states', esc((m.states || []).join(', '))],
      ['parameters', num(c.parameters)], ['derived quantities', num(c.derived)], ['reactions', num(c.reactions)],
      ['events', esc((m.events || []).join(', ') || '—')], ['Jacobian non-zeros', num(c.jacobian_nonzeros)],
      ['conservation laws', num((m.conservation_laws || []).length)],
    ]);
  }

  async function loadSpec() {
    const resp = await api(`/v1/jobs/${encodeURIComponent(jobId)}/spec`);
    if (resp.ok) document.getElementById('spec').textContent = JSON.stringify(await resp.json(), null, 2);
  }

  function setupControls() {
    document.querySelectorAll('.seg').forEach(seg => {
      const axis = seg.dataset.axis;
      const paint = () => seg.querySelectorAll('button').forEach(b => b.classList.toggle('on', b.dataset.v === view[axis]));
      paint();
      seg.querySelectorAll('button').forEach(b => b.onclick = () => {
        view[axis] = b.dataset.v; paint();
        if (!result) return;
        if (axis === 'sx') drawSteps();
        else { drawTrajectories(); if (axis === 'tx') { drawStiffness(); drawDrift(); } }
      });
    });
    document.querySelectorAll('#downloads button').forEach(b => b.onclick = () =>
      download(`/v1/jobs/${encodeURIComponent(jobId)}/result?format=${b.dataset.fmt}`, `${jobId}.${b.dataset.fmt}`));
    document.getElementById('cancel').onclick = async () => {
      const resp = await api(`/v1/jobs/${encodeURIComponent(jobId)}/cancel`, { method: 'POST' });
      if (!resp.ok && resp.status !== 202) alert(await problemText(resp));
      etag = null;
    };
  }

  window.SLJob = { charts: () => charts, result: () => result };  // for tests and the console
  document.addEventListener('DOMContentLoaded', () => { setupControls(); poll(); loadSpec(); });
})();
