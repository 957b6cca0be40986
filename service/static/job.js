// One job: live progress, trajectories (live while it runs, partial when it stopped early),
// sensitivities and the ranking of parameters by the outputs the spec names, the stiffness
// report drawn, events, downloads, the spec.
(function () {
  'use strict';
  const { api, download, esc, num, duration, elapsed, stateBadge, problemText } = window.SL;
  const P = window.SLPlots;
  const jobId = decodeURIComponent(location.pathname.split('/').pop());
  const ACTIVE = new Set(['queued', 'running']);
  const LIVE_EVERY_MS = 2000;  // a running job's snapshot is re-read this often
  const view = { tx: 'lin', ty: 'lin', sx: 'lin', sk: 'normalised' };
  const chosen = new Set();    // axes the user has set: the stiff-run default leaves them alone
  let job = null, etag = null, result = null, spec = null, charts = { trajPanels: [] }, picked = null;
  let resultFinal = false, resultAt = 0, resultBusy = false, noResult = null, pickNames = '';
  let sensState = null;        // the state whose sensitivities are drawn (kept across refreshes)

  const $ = id => document.getElementById(id);

  function kv(rows) {
    return rows.filter(r => r[1] !== undefined).map(([k, v]) => `<tr><td>${esc(k)}</td><td>${v}</td></tr>`).join('');
  }

  // ---- the run: state, progress (kept at the fraction reached when it stopped early), facts

  function spanOf() {
    const s = spec && Array.isArray(spec.span) ? spec.span : null;
    return s && s.length === 2 ? s : null;
  }

  function tEnd() {
    if (result && result.t_end != null) return result.t_end;
    const s = spanOf();
    return s ? s[1] : null;
  }

  function tReached() {
    if (!result) return null;
    if (result.t_reached != null) return result.t_reached;
    const r = (result.report || {}).t_reached;
    if (r != null) return r;
    return result.times && result.times.length ? result.times[result.times.length - 1] : null;
  }

  // The fraction of the span reached: the job's progress, or the result's t_reached.
  function fraction() {
    if (job.progress) return job.progress;
    const s = spanOf(), tr = tReached();
    if (s && tr != null && s[1] !== s[0]) return Math.max(0, Math.min(1, (tr - s[0]) / (s[1] - s[0])));
    return 0;
  }

  function showJob() {
    document.title = 'Stifflane · ' + (job.label || job.id);
    $('title').textContent = job.label || 'untitled';
    $('jobid').textContent = job.id;
    $('state').innerHTML = stateBadge(job.state);
    const active = ACTIVE.has(job.state), stopped = !active && job.state !== 'succeeded';
    $('cancel').classList.toggle('hidden', !active || job.cancel_requested);
    $('downloads').classList.toggle('hidden', !result || !resultFinal);
    $('progress-card').classList.toggle('hidden', !active && !stopped);
    const pct = 100 * fraction();
    const bar = $('progress-bar');
    bar.style.width = pct.toFixed(1) + '%';
    bar.classList.toggle('stopped', stopped);
    let text;
    if (job.state === 'queued') text = `queued, waiting for a worker — ${pct.toFixed(1)}% of the span`;
    else if (active) text = `integrating — ${pct.toFixed(1)}% of the span`;
    else {
      const tr = tReached(), te = tEnd();
      text = `${job.state} at ${pct.toFixed(1)}% of the span` + (tr != null && te != null ? ` (t = ${num(tr)} of ${num(te)})` : '');
    }
    $('progress-text').textContent = text;
    $('elapsed').textContent = job.started_at ? 'elapsed ' + duration(elapsed(job)) : '';
    const out = $('outcome');
    if (!active) {
      const cls = job.state === 'succeeded' ? 'ok' : 'bad';
      out.innerHTML = `<div class="notice ${cls}"><b>${esc(job.outcome || job.state)}</b> — ${esc(job.message || '')}</div>`;
    } else out.innerHTML = job.cancel_requested ? '<div class="notice">cancel requested…</div>' : '';
    const d = job.digest || {};
    $('run-facts').innerHTML = kv([
      ['state', stateBadge(job.state)], ['outcome', esc(job.outcome || '—')], ['method asked', esc(job.method)],
      ['methods used', esc((d.methods_used || []).join(', ') || '—')], ['reached t', num(d.t_reached)],
      ['submitted', esc(new Date(job.created_at).toLocaleString())], ['wall time', duration(elapsed(job))],
      ['solver time', duration(d.solve_seconds)], ['model evaluated by', tier(d.machine_code)],
      ['attempt', num(job.attempt)],
      job.owner ? ['owner', esc(job.owner)] : ['owner', undefined],
    ]);
    showWaiting();
  }

  // how the worker evaluated the model's right-hand side (engine.native)
  function tier(mc) {
    if (!mc) return '—';
    if (mc.used) return `machine code (${duration(mc.seconds)} to build or load)`;
    return `interpreter <span class="sub">(${esc(mc.reason || '')})</span>`;
  }

  // The card in place of the plots while there is nothing to draw. The job's message is in the
  // outcome notice above: it is not repeated here.
  function showWaiting() {
    const w = document.querySelector('#waiting .empty');
    if (result) { $('waiting').classList.add('hidden'); return; }
    $('waiting').classList.remove('hidden');
    if (job.state === 'queued') w.textContent = 'The run is queued; its plots appear here once it has computed something.';
    else if (job.state === 'running') w.textContent = 'The run has started; its plots appear here with its first snapshot, within a few seconds.';
    else if (job.state === 'succeeded') w.textContent = 'Loading the result…';
    else if (noResult) w.textContent = 'Nothing to plot: the server kept no result of this run.';
    else w.textContent = 'Loading what the run computed…';
  }

  async function poll() {
    if (window.SL.paused()) { setTimeout(poll, 1000); return; }
    const headers = etag ? { 'If-None-Match': etag } : {};
    const resp = await api('/v1/jobs/' + encodeURIComponent(jobId), { headers });
    if (resp.status === 200) {
      etag = resp.headers.get('ETag');
      job = await resp.json();
      showJob();
    } else if (resp.status === 429 || resp.status >= 500) {
      setTimeout(poll, 2000);  // busy or restarting: try again
      return;
    } else if (resp.status !== 304) {
      $('outcome').innerHTML = `<div class="notice bad">${esc(await problemText(resp))}</div>`;
      return;
    }
    if (job) {
      if (!ACTIVE.has(job.state) && !resultFinal && !noResult) await loadResult();
      else if (job.state === 'running' && Date.now() - resultAt >= LIVE_EVERY_MS) await loadResult();
    }
    if (!job || ACTIVE.has(job.state)) setTimeout(poll, 1000);
  }

  // The result: whole once succeeded; partial for a failed or cancelled run and, while the job
  // runs, its latest snapshot (409 until there is one).
  async function loadResult() {
    if (resultBusy) return;
    resultBusy = true;
    try {
      const state = job.state;
      resultAt = Date.now();
      const resp = await api(`/v1/jobs/${encodeURIComponent(jobId)}/result`);
      if (resp.status === 409) {
        if (!ACTIVE.has(state)) {  // a finished job with nothing to show (kind no-result)
          let kind = '';
          try { kind = (await resp.json()).kind || ''; } catch (e) { /* not a problem document */ }
          noResult = kind || 'no-result';
        }
        showWaiting();
        return;
      }
      if (!resp.ok) return;
      const got = await resp.json();
      if (ACTIVE.has(got.state) && job && !ACTIVE.has(job.state)) return;  // a snapshot read just before the end
      result = got;
      resultFinal = !ACTIVE.has(state) && !ACTIVE.has(result.state || state);
      showResult();
      showJob();
    } finally { resultBusy = false; }
  }

  function isPartial() {
    if (!result) return false;
    if (result.partial != null) return !!result.partial;
    return (result.state || job.state) !== 'succeeded';
  }

  function isStiff() {
    const r = result.report || {};
    const methods = (r.methods_used || []).concat(r.method ? [r.method] : []);
    const out = (spec && spec.output) || {};
    return out.spacing === 'log' || methods.some(m => P.IMPLICIT.has(m)) || (r.switches || []).length > 0;
  }

  function showResult() {
    $('result-area').classList.remove('hidden');
    document.querySelectorAll('.result-only').forEach(e => e.classList.remove('hidden'));
    if (isStiff()) {  // stiff runs open on a log time axis
      for (const axis of ['tx', 'sx']) if (!chosen.has(axis)) view[axis] = 'log';
      paintSegs();
    }
    showPartial();
    buildPicker();
    drawAll();
    showReport();
    showEvents();
    showRanking();
  }

  function showPartial() {
    const el = $('partial-note');
    if (!isPartial()) { el.classList.add('hidden'); return; }
    const tr = tReached(), te = tEnd();
    const live = ACTIVE.has(result.state || job.state);
    const upTo = `solved up to t = ${num(tr)}` + (te != null ? ` of ${num(te)}` : '');
    el.textContent = live ? `live: ${upTo}; the plots refresh while the run goes on`
      : `partial: ${upTo}; the run ${(result.state || job.state) === 'cancelled' ? 'was cancelled' : 'failed'} there ` +
        `(${result.outcome || job.outcome || 'stopped'}). The plots, counters and step history show what it computed.`;
    el.classList.remove('hidden');
  }

  // ---- names, units, picking

  function names() {
    return { states: Object.keys(result.states || {}), derived: Object.keys(result.derived || {}) };
  }

  // A name's unit: the result's units (when the server reports them), else the submitted model's.
  function unitOf(name) {
    const u = (result && result.units) || {};
    if (u[name]) return u[name];
    const m = (result && result.model) || {};
    if (m.units && m.units[name]) return m.units[name];
    const sm = (spec && spec.model) || {};
    for (const group of ['states', 'parameters']) {
      const e = (sm[group] || {})[name];
      if (e && typeof e === 'object' && typeof e.unit === 'string' && e.unit) return e.unit;
    }
    return '';
  }

  function buildPicker() {
    const { states, derived } = names();
    const all = states.map(n => ['state', n]).concat(derived.map(n => ['derived', n]));
    const key = JSON.stringify(all);
    if (key === pickNames) return;  // a live refresh keeps the user's picks
    pickNames = key;
    picked = new Set(states);
    $('pick').innerHTML = all.map(([kind, n], i) => {
      const unit = unitOf(n);
      return `<label title="${kind}"><input type="checkbox" value="${esc(n)}" ${picked.has(n) ? 'checked' : ''}>` +
        `<span class="swatch" data-bg="${P.PALETTE[i % P.PALETTE.length]}"></span>${esc(n)}` +
        (unit ? ` <span class="muted">[${esc(unit)}]</span>` : '') +
        `${kind === 'derived' ? ' <span class="muted">(derived)</span>' : ''}</label>`;
    }).join('');
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

  function events() { return (result.events || []).filter(e => e && e.t != null); }

  // The x range of a run that stopped early: the whole span, so the part not reached shows
  // (a live snapshot keeps the range it has: the progress bar shows how far it is).
  function partialX() {
    const s = spanOf(), te = tEnd();
    if (!isPartial() || te == null || ACTIVE.has(result.state || job.state)) return {};
    const lo = s ? s[0] : (result.times || [0])[0];
    return { xrange: [lo, te], unsolvedFrom: tReached() };
  }

  function destroyPanels() {
    (charts.trajPanels || []).forEach(P.destroy);
    charts.trajPanels = [];
    charts.traj = null;
  }

  // One panel per unit: states in different units never share a value axis.
  function drawTrajectories() {
    destroyPanels();
    const { states, derived } = names();
    const all = states.concat(derived);
    const series = all.map((n, i) => ({ n, i })).filter(o => picked.has(o.n)).map(o => ({
      label: o.n, values: column(o.n), color: P.PALETTE[o.i % P.PALETTE.length], unit: unitOf(o.n) }));
    const el = $('traj');
    if (!series.length) { el.innerHTML = '<div class="empty">Pick a state or derived quantity above.</div>'; return; }
    const groups = new Map();
    for (const s of series) {
      if (!groups.has(s.unit)) groups.set(s.unit, []);
      groups.get(s.unit).push(s);
    }
    el.innerHTML = '';
    const many = groups.size > 1, height = many ? Math.max(200, Math.round(380 / Math.min(groups.size, 2))) : 380;
    for (const [unit, group] of groups) {
      const panel = document.createElement('div');
      panel.className = 'panel';
      panel.dataset.unit = unit;
      el.appendChild(panel);
      const box = document.createElement('div');
      panel.appendChild(box);
      const chart = P.lineChart(box, Object.assign({
        x: result.times, series: group, xlog: view.tx === 'log', ylog: view.ty === 'log', height, xlabel: 't',
        ylabel: unit || (many ? 'no unit' : ''), markers: switchMarkers(), events: events(), sync: 'traj-' + jobId,
      }, partialX()));
      charts.trajPanels.push(chart);
    }
    charts.traj = charts.trajPanels[0];
  }

  function drawSteps() {
    P.destroy(charts.steps);
    charts.steps = null;
    const rep = result.report || {}, hist = rep.step_history;
    const el = $('steps');
    if (!hist || !hist.t || !hist.t.length) {
      el.innerHTML = `<div class="empty">${ACTIVE.has(job.state) ? 'The step history appears when the run reports it.' : 'No step history.'}</div>`;
      $('method-legend').innerHTML = '';
      $('steps-note').textContent = stepsSentence(rep);
      return;
    }
    const tEndRun = rep.t_reached != null ? rep.t_reached : tReached();
    const series = [{ label: 'step taken h', values: hist.h, color: '#1b2230', width: 1.8 }];
    if ((hist.explicit_step || []).some(v => v != null))
      series.push({ label: 'explicit stability limit', values: hist.explicit_step, color: '#d0582b', dash: [6, 4] });
    charts.steps = P.lineChart(el, Object.assign({ x: hist.t, series, xlog: view.sx === 'log', ylog: true, height: 300,
      xlabel: 't', ylabel: 'step size', bands: P.methodBands(hist, tEndRun), markers: switchMarkers(), events: events() },
      partialX()));
    const used = Array.from(new Set(hist.method));
    $('method-legend').innerHTML = used.map(m =>
      `<span><i data-bg="${P.METHOD_COLORS[m] || '#999'}"></i>${esc(m)} phase</span>`).join('') +
      '<span class="muted">dashed vertical lines: method switches</span>' +
      (events().length ? '<span class="muted">dotted lines with ◆: events</span>' : '');
    $('steps-note').textContent = stepsSentence(rep);
  }

  // What the step count says, phrased by case: a stiff run that switched, a run that was not
  // stiff (the explicit method did the work), an explicit run held at its stability limit.
  function stepsSentence(rep) {
    const need = rep.explicit_steps_needed, took = rep.accepted_steps;
    if (need == null || took == null) return '';
    const N = num(Math.ceil(need)), T = num(took);
    const used = rep.methods_used || [];
    if (ACTIVE.has((result && result.state) || job.state))
      return `So far ${T} accepted steps` + (used.length ? ` with ${used.join(' and ')}` : '') +
        `; an explicit method alone would have needed about ${N} for the part solved. The verdict comes when the run ends.`;
    const implicit = used.filter(m => P.IMPLICIT.has(m));
    const explicit = used.filter(m => !P.IMPLICIT.has(m));
    if (implicit.length && need > took) {
      const times = need / Math.max(1, took);
      return `Stiff run: an explicit method alone would have needed about ${N} steps for this span (held by its ` +
        `stability limit); with ${implicit.join(' and ')} the run took ${T} accepted steps` +
        (times >= 2 ? `, about ${num(times, 2)} times fewer.` : '.');
    }
    if (implicit.length) {
      return `The run used ${implicit.join(' and ')} for part of the span, but its steps were set by the accuracy ` +
        `asked for rather than by stability: ${T} accepted steps, where stability alone would have allowed steps ` +
        `for about ${N}.`;
    }
    const m = explicit.join(', ') || 'the explicit method';
    if (took > 2 * need) {
      return `Not stiff: ${m} did all the work in ${T} accepted steps, sized by the accuracy asked for; ` +
        `its stability limit was never what held the steps back (it alone would have allowed about ${N} steps ` +
        `for this span).`;
    }
    return `${m} did all the work in ${T} accepted steps, close to the about ${N} its stability limit allows for ` +
      `this span: the steps were held by stability, so the model may be stiff here` +
      (job && job.method === 'auto' ? '; the run did not last long enough in that regime for a switch to pay.' :
        '; method auto could switch to an implicit method.');
  }

  function drawStiffness() {
    P.destroy(charts.stiff);
    charts.stiff = null;
    const samples = (result.report || {}).stiffness_samples || [];
    const el = $('stiff');
    if (!samples.length) { el.innerHTML = '<div class="empty">No samples.</div>'; return; }
    const series = [{ label: 'spectral radius', values: samples.map(s => s.spectral_radius), points: true }];
    if (samples.some(s => s.stiffness_ratio != null))
      series.push({ label: 'stiffness ratio', values: samples.map(s => s.stiffness_ratio), points: true, color: '#8a4fbf' });
    charts.stiff = P.lineChart(el, { x: samples.map(s => s.t), series, xlog: view.tx === 'log', ylog: true,
      height: 240, xlabel: 't' });
    const withEig = samples.filter(s => s.dominant_eigenvalues && s.dominant_eigenvalues.length);
    $('eig-box').classList.toggle('hidden', !withEig.length);
    const lam = ([re, im]) => num(re, 3) + (im ? (im > 0 ? ' + ' : ' − ') + num(Math.abs(im), 3) + 'i' : '');
    $('eig').innerHTML = '<table class="data compact"><thead><tr><th class="num">t</th>' +
      '<th>largest in magnitude</th><th class="num">explicit step</th></tr></thead><tbody>' +
      withEig.map(s => `<tr><td class="num">${num(s.t)}</td><td class="mono">${s.dominant_eigenvalues.map(lam).join(', ')}</td>` +
        `<td class="num">${num(s.explicit_step)}</td></tr>`).join('') + '</tbody></table>';
  }

  // Drift of each conservation law c·y(t) relative to its start, scaled like the engine's report.
  function drawDrift() {
    P.destroy(charts.drift);
    charts.drift = null;
    const laws = ((result.model || {}).conservation_laws) || [];
    const el = $('drift');
    const n = (result.times || []).length;
    if (!laws.length || !n) { el.innerHTML = `<div class="empty">${laws.length ? 'No output rows yet.' : 'No conservation laws in this model.'}</div>`; return; }
    const st = names().states.map(column);
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

  function drawAll() { drawTrajectories(); drawSensitivities(); drawSteps(); drawStiffness(); drawDrift(); }

  // ---- sensitivities dy/dθ of one state, one line per θ (spec field sensitivity)

  function sensStates() {
    const s = result.sensitivity;
    return s && s.raw ? Object.keys(s.raw) : [];
  }

  function drawSensitivities() {
    P.destroy(charts.sens);
    charts.sens = null;
    const sens = result.sensitivity, card = $('sens-card');
    const states = sensStates();
    card.classList.toggle('hidden', !states.length);
    if (!states.length) return;
    const ranked = (sens.ranking || []).map(r => r.output && r.output.state).filter(n => states.includes(n));
    if (!states.includes(sensState)) sensState = ranked[0] || states[0];
    const sel = $('sens-state');
    if (sel.dataset.names !== states.join('\n')) {
      sel.dataset.names = states.join('\n');
      sel.innerHTML = states.map(n => `<option value="${esc(n)}">${esc(n)}</option>`).join('');
    }
    sel.value = sensState;
    const normalised = view.sk !== 'raw';
    const by = (normalised ? sens.normalised : sens.raw)[sensState] || {};
    const labels = sens.wrt || Object.keys(by);
    const series = labels.map((w, i) => ({ label: w, values: by[w] || [], color: P.PALETTE[i % P.PALETTE.length] }));
    const unit = unitOf(sensState);
    const ylabel = normalised ? `d ln ${sensState} / d ln θ` : `d${sensState} / dθ` + (unit ? ` [${unit} per unit of θ]` : '');
    charts.sens = P.lineChart($('sens'), Object.assign({ x: result.times, series, xlog: view.tx === 'log', ylog: false,
      height: 300, xlabel: 't', ylabel, events: events(), sync: 'traj-' + jobId }, partialX()));
    const blanks = normalised && series.some(s => s.values.some(v => v == null));
    $('sens-note').textContent = (normalised
      ? `Relative change of ${sensState} per relative change of each θ (raw dy/dθ · θ / y)` +
        (blanks ? `; blank where ${sensState} or θ is 0, which has no relative change.` : '.')
      : `Change of ${sensState} per unit change of each θ, in the state's unit divided by θ's.`) +
      (sens.error_control === false ? ' The sensitivities did not steer the step size (error_control false).' : '');
  }

  // ---- the ranking: per output a signed bar chart and a table (spec field sensitivity.rank)

  function showRanking() {
    const ranked = (result.sensitivity && result.sensitivity.ranking) || [];
    $('rank-card').classList.toggle('hidden', !ranked.length);
    if (!ranked.length) { $('ranking').innerHTML = ''; return; }
    $('ranking').innerHTML = ranked.map(rankBlock).join('');
  }

  function signed(v) { return v == null ? '—' : (v > 0 ? '+' : v < 0 ? '−' : '') + num(Math.abs(v)); }

  function rankBlock(r, k) {
    const out = r.output || {};
    const what = out.summary === 'crossing' ? 'delay' : out.summary === 'integral' ? 'integral' : 'value';
    const at = r.t != null && out.summary !== 'integral' ? ` at t = ${num(r.t)}` : '';
    const head = `<h3 class="rank-title">${esc(r.label || out.state)}<span class="muted"> — ${what} ` +
      `${r.value == null ? '—' : num(r.value)}${esc(at)}</span></h3>`;
    const note = r.note ? `<div class="notice">${esc(r.note)}</div>` : '';
    const entries = (r.entries || []).filter(e => e.normalised != null || e.raw != null);
    if (!entries.length) return `<div class="rank-output" data-output="${k}">${head}${note}</div>`;
    const top = Math.max(...entries.map(e => Math.abs(e.normalised || 0))) || 1;
    const name = e => `<span class="mono">${esc(e.wrt)}</span>` +
      ((e.reactions || []).length ? ` <span class="muted">${esc(e.reactions.join(', '))}</span>` : '');
    const bars = entries.map(e => {
      const v = e.normalised, w = v == null ? 0 : (100 * Math.abs(v) / top).toFixed(1);
      return `<div class="rank-row" data-wrt="${esc(e.wrt)}"><span class="rank-name">${name(e)}</span>` +
        `<span class="rank-neg">${v != null && v < 0 ? `<i data-w="${w}"></i>` : ''}</span>` +
        `<span class="rank-pos">${v != null && v > 0 ? `<i data-w="${w}"></i>` : ''}</span>` +
        `<span class="rank-val">${signed(v)}</span></div>`;
    }).join('');
    const table = '<table class="data compact"><thead><tr><th class="num">rank</th><th>θ</th><th>reactions</th>' +
      '<th class="num">normalised</th><th class="num">raw</th></tr></thead><tbody>' +
      entries.map((e, i) => `<tr><td class="num">${i + 1}</td><td class="mono">${esc(e.wrt)}</td>` +
        `<td>${esc((e.reactions || []).join(', ') || '—')}</td><td class="num">${signed(e.normalised)}</td>` +
        `<td class="num">${signed(e.raw)}</td></tr>`).join('') + '</tbody></table>';
    return `<div class="rank-output" data-output="${k}">${head}${note}<div class="rank-grid">` +
      `<div class="rank-bars" aria-label="normalised sensitivities of ${esc(r.label || '')}">${bars}</div>` +
      `<div class="scroll-x">${table}</div></div></div>`;
  }

  function showReport() {
    const r = result.report || {};
    const per = r.steps_per_method || {}, secs = r.seconds_per_method || {};
    const methods = Object.keys(per).filter(m => per[m]);
    $('counters').innerHTML = kv([
      ['accepted steps', num(r.accepted_steps)], ['rejected steps', num(r.rejected_steps)],
      ['right-hand-side evaluations', num(r.rhs_evaluations)], ['Jacobian evaluations', num(r.jacobian_evaluations)],
      ['LU factorisations', num(r.lu_factorizations)], ['Newton iterations', num(r.newton_iterations)],
      ['Newton failures', num(r.newton_failures)], ['events found', num(r.events_found)],
      ['method switches', num(r.switch_count)], ['explicit steps needed (estimate)', r.explicit_steps_needed == null ? '—' : num(Math.ceil(r.explicit_steps_needed))],
      ['conservation drift (max)', num(r.conservation_drift)],
    ].concat(methods.map(m => [`steps / time in ${m}`, `${num(per[m])} / ${duration(secs[m])}`]))
      .concat(ACTIVE.has(result.state || '') && r.method ? [['method now', esc(r.method)]] : []));
    const sw = r.switches || [];
    $('switches').innerHTML = !sw.length ? '<div class="empty">No switches.</div>' : `<table class="data"><thead><tr>
      <th class="num">t</th><th>from</th><th>to</th><th class="num">step h</th><th class="num">spectral radius</th>
      <th class="num">explicit step</th><th>reason</th></tr></thead><tbody>` + sw.map(s => `<tr>
      <td class="num">${num(s.t)}</td><td>${esc(s.from)}</td><td>${esc(s.to)}</td><td class="num">${num(s.h)}</td>
      <td class="num">${num(s.rho)}</td><td class="num">${num(s.explicit_step != null ? s.explicit_step : s.h_stability)}</td>
      <td>${esc(s.reason)}</td></tr>`).join('') + '</tbody></table>';
    const notes = (r.warnings || []).map(w => `<div class="notice">${esc(w)}</div>`);
    if (result.caution) notes.push(`<div class="notice">${esc(result.caution)}</div>`);
    $('report-notices').innerHTML = notes.join('');
    const m = result.model || {}, c = m.counts || {};
    $('model-facts').innerHTML = kv([
      ['title', esc(m.title || '—')], ['states', esc((m.states || []).map(s => unitOf(s) ? `${s} [${unitOf(s)}]` : s).join(', '))],
      ['parameters', num(c.parameters)], ['derived quantities', num(c.derived)], ['reactions', num(c.reactions)],
      ['events', esc((m.events || []).join(', ') || '—')], ['Jacobian non-zeros', num(c.jacobian_nonzeros)],
      ['conservation laws', num((m.conservation_laws || []).length)],
    ]);
  }

  // Events located during the run: name, time and the states there.
  function showEvents() {
    const evs = events(), el = $('events');
    const defined = (result.model || {}).events || [];
    if (!evs.length) {
      el.innerHTML = `<div class="empty">${defined.length ? 'None of the model\'s events (' + esc(defined.join(', ')) +
        ') happened in the part of the span solved.' : 'The model defines no events.'}</div>`;
      return;
    }
    const st = names().states;
    const head = st.map(n => `<th class="num">${esc(n)}${unitOf(n) ? ` <span class="unit">[${esc(unitOf(n))}]</span>` : ''}</th>`).join('');
    const shown = evs.slice(0, 500);
    el.innerHTML = `<div class="scroll-x"><table class="data compact"><thead><tr><th>event</th><th class="num">t</th>${head}</tr></thead><tbody>` +
      shown.map(e => `<tr><td class="mono">${esc(e.name)}</td><td class="num">${P.fmtTime(e.t)}</td>` +
        st.map(n => `<td class="num">${e.states && e.states[n] != null ? P.fmtValue(e.states[n]) : '—'}</td>`).join('') + '</tr>').join('') +
      '</tbody></table></div>' + (evs.length > shown.length ? `<p class="muted">and ${num(evs.length - shown.length)} more (in the JSON download)</p>` : '');
  }

  async function loadSpec() {
    const resp = await api(`/v1/jobs/${encodeURIComponent(jobId)}/spec`);
    if (!resp.ok) return;
    spec = await resp.json();
    $('spec').textContent = JSON.stringify(spec, null, 2);
  }

  function paintSegs() {
    document.querySelectorAll('.seg').forEach(seg => seg.querySelectorAll('button').forEach(b =>
      b.classList.toggle('on', b.dataset.v === view[seg.dataset.axis])));
  }

  function setupControls() {
    paintSegs();
    document.querySelectorAll('.seg').forEach(seg => {
      const axis = seg.dataset.axis;
      seg.querySelectorAll('button').forEach(b => b.onclick = () => {
        view[axis] = b.dataset.v; chosen.add(axis); paintSegs();
        if (!result) return;
        if (axis === 'sx') drawSteps();
        else if (axis === 'sk') drawSensitivities();
        else { drawTrajectories(); if (axis === 'tx') { drawSensitivities(); drawStiffness(); drawDrift(); } }
      });
    });
    document.querySelectorAll('#downloads button').forEach(b => b.onclick = () =>
      download(`/v1/jobs/${encodeURIComponent(jobId)}/result?format=${b.dataset.fmt}`, `${jobId}.${b.dataset.fmt}`));
    $('sens-state').onchange = ev => { sensState = ev.target.value; if (result) drawSensitivities(); };
    $('rank-csv').onclick = () => download(`/v1/jobs/${encodeURIComponent(jobId)}/result?table=ranking`,
      `${jobId}-ranking.csv`);
    $('cancel').onclick = async () => {
      const resp = await api(`/v1/jobs/${encodeURIComponent(jobId)}/cancel`, { method: 'POST' });
      if (!resp.ok && resp.status !== 202) alert(await problemText(resp));
      etag = null;
    };
  }

  window.SLJob = { charts: () => charts, result: () => result, view: () => Object.assign({}, view) };  // for tests and the console
  document.addEventListener('DOMContentLoaded', async () => { setupControls(); await loadSpec(); poll(); });
})();
