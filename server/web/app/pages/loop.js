// The loop: the service's flowsheet layout drawn as SVG, labelled from one period's report.
import { api, cached, seg, qs } from '../api.js';
import { h, s, clear, message, loading, errorBox, ready, utc, iso, num, pm, pmu, HOUR, parseTime, stateInfo, stateBadge, select } from '../dom.js';
import { latestStart, plantInfo, periodMs } from './common.js';
import { globalTest } from './plants.js';

const MODES = [
  ['reconciled', 'Reconciled flow'],
  ['measured', 'Measured'],
  ['adjustment', 'Adjustment'],
  ['composition', 'Composition'],
];

function compEntries(obj) {
  // composition / component_flows as {C: v} or [{component, value}] or null
  if (!obj) return [];
  if (Array.isArray(obj)) return obj.map((e) => [e.component ?? e.id ?? e[0], e.value ?? e[1]]);
  return Object.entries(obj);
}
function compGet(obj, c) {
  if (!obj) return null;
  if (Array.isArray(obj)) { const e = obj.find((x) => (x.component ?? x.id) === c); return e ? e.value : null; }
  return obj[c] ?? null;
}

export async function render(ctx, view) {
  const plant = ctx.route.plant;
  const q = ctx.route.q;
  const P = `/plants/${seg(plant)}`;
  const [sheet, meterList, last, info] = await Promise.all([
    cached(`${P}/flowsheet`, 60000),
    api(`${P}/meters`),
    latestStart(plant),
    plantInfo(plant).catch(() => null),
  ]);
  const pms = periodMs(info);
  const health = new Map((meterList.meters || []).map((m) => [m.tag, m]));
  let period = q.period ? parseTime(q.period) : last;
  let mode = MODES.some(([m]) => m === q.mode) ? q.mode : 'reconciled';
  let report = null;
  let selected = q.stream || null;

  view.append(h('h1', null, 'The loop ', h('span', { class: 'muted mono', text: plant })),
    h('p', { class: 'lede', text: 'Units and streams as the model connects them. Labels show one period\'s values with ± 1σ; select a stream for its flows and composition, or a meter for its history.' }));

  if (period === null || Number.isNaN(period)) {
    view.append(message('info', 'No period of this plant has been reconciled yet: the drawing shows the model only.'));
  }

  // ---- toolbar -------------------------------------------------------------------------
  const periodSel = h('select', { id: 'period', 'aria-describedby': 'period-hint' });
  const prevBtn = h('button', { type: 'button', class: 'btn btn-small', text: '◀', 'aria-label': 'Previous period', title: 'Previous period' });
  const nextBtn = h('button', { type: 'button', class: 'btn btn-small', text: '▶', 'aria-label': 'Next period', title: 'Next period' });
  const compSel = h('select', { id: 'label-component', 'aria-label': 'Component shown in composition labels' });
  const radios = h('div', { class: 'radios' });
  for (const [m, label] of MODES) {
    const id = `label-mode-${m}`;
    radios.append(h('label', { for: id },
      h('input', { type: 'radio', name: 'label-mode', id, value: m, checked: m === mode }), label));
  }
  radios.append(h('label', { for: 'label-component', class: 'visually-hidden', text: 'Component' }), compSel);
  const tagsBox = h('input', { type: 'checkbox', id: 'show-tags', checked: q.tags === '1' });
  const fitBox = h('input', { type: 'checkbox', id: 'fit-sheet', checked: q.fit === '1' });
  const toolbar = h('div', { class: 'toolbar' },
    h('div', { class: 'field' },
      h('label', { for: 'period', text: 'Period (start, UTC)' }),
      h('div', { class: 'period-nav' }, prevBtn, periodSel, nextBtn),
      h('span', { class: 'hint', id: 'period-hint', text: 'The latest 48 periods; older ones from the Balances or Figures pages.' })),
    h('fieldset', null, h('legend', { text: 'Stream labels' }), radios),
    h('div', { class: 'field' }, h('span', { class: 'field-title', text: 'Drawing' }),
      h('label', { for: 'show-tags', class: 'check' }, tagsBox, ' show meter tags'),
      h('label', { for: 'fit-sheet', class: 'check' }, fitBox, ' fit the drawing to the width')));
  view.append(toolbar);

  const status = h('div', { class: 'page-status' });
  view.append(status);

  // ---- drawing and side ------------------------------------------------------------------
  const svg = buildSheet(sheet, health, plant);
  svg.el.classList.toggle('show-tags', tagsBox.checked);
  tagsBox.addEventListener('change', () => svg.el.classList.toggle('show-tags', tagsBox.checked));
  svg.el.classList.toggle('fit', fitBox.checked);
  fitBox.addEventListener('change', () => svg.el.classList.toggle('fit', fitBox.checked));
  const side = h('aside', { class: 'side', 'aria-label': 'Period and stream details' });
  const periodCard = h('section', { class: 'card', id: 'period-card', 'aria-labelledby': 'period-card-h' });
  const panel = h('section', { class: 'card', id: 'stream-panel', 'aria-live': 'polite', 'aria-labelledby': 'stream-panel-h' });
  side.append(periodCard, panel);
  view.append(h('div', { class: 'loop-layout' },
    h('div', { class: 'card sheet-card' }, svg.el, sheetLegend()), side));

  // periods for the picker
  async function fillPeriods() {
    clear(periodSel);
    if (period === null || Number.isNaN(period)) { periodSel.disabled = true; return; }
    const anchor = Math.max(period, last ?? period);
    let list = [];
    try {
      const ans = await api(`${P}/periods${qs({ from: iso(anchor - 47 * pms), to: iso(anchor + pms) })}`);
      list = (ans.periods || []).slice().reverse();
    } catch { list = []; }
    if (!list.some((p) => parseTime(p.start ?? p.period_start) === period)) list.unshift({ start: iso(period), status: '' });
    for (const p of list) {
      const t = parseTime(p.start ?? p.period_start);
      periodSel.append(h('option', { value: iso(t), selected: t === period, text: `${utc(t, false)}${p.status ? ` — ${p.status}` : ''}` }));
    }
  }

  async function loadReport() {
    ready(false);
    clear(status);
    clear(periodCard).append(loading('Loading the period…'));
    report = null;
    if (period !== null && !Number.isNaN(period)) {
      try {
        const run = await api(`${P}/periods/${seg(iso(period))}`);
        report = run.report || null;
        if (!report) status.append(message('info', `No report for ${utc(period)} yet.`));
      } catch (err) {
        if (err.status === 401) return;
        status.append(errorBox(err, `The period ${utc(period)}`));
      }
    }
    if (!ctx.alive()) return;
    fillComponents();
    drawPeriodCard();
    svg.label(report, mode, compSel.value);
    drawPanel();
    ready(true);
  }

  function fillComponents() {
    const comps = new Set();
    for (const st of (report && report.streams) || []) for (const [c] of compEntries(st.composition)) comps.add(c);
    const want = compSel.value || q.component;
    clear(compSel);
    for (const c of comps) compSel.append(h('option', { value: c, text: c, selected: c === want }));
    compSel.disabled = mode !== 'composition';
  }

  function drawPeriodCard() {
    clear(periodCard);
    periodCard.append(h('h2', { id: 'period-card-h', text: 'Period' }));
    if (!report) { periodCard.append(h('p', { class: 'muted', text: 'No report for this period.' })); return; }
    const gt = report.global_test;
    const mt = report.measurement_test;
    periodCard.append(h('dl', null,
      h('dt', { text: 'From' }), h('dd', { text: utc(report.period_start) }),
      h('dt', { text: 'To' }), h('dd', { text: utc(report.period_end) }),
      h('dt', { text: 'Status' }), h('dd', { text: report.status, 'data-testid': 'period-status' }),
      h('dt', { text: 'Global test' }), h('dd', { 'data-testid': 'global-test' }, globalTest(gt)),
      h('dt', { text: 'α' }), h('dd', { text: gt && gt.alpha !== undefined ? num(gt.alpha, 3) : '–' }),
      h('dt', { text: 'Meas. test' }), h('dd', { text: mt ? `critical |z| ${num(mt.critical, 4)}, β ${num(mt.alpha_per_test, 3)} per test (Šidák), ${mt.tests} meters tested` : '–' }),
      h('dt', { text: 'Redundancy' }), h('dd', { text: report.redundancy ?? '–' })));
    const faults = report.faults || [];
    periodCard.append(h('h3', { text: `Faults identified (${faults.length})` }));
    if (!faults.length) periodCard.append(h('p', { class: 'small muted', text: 'None this period.' }));
    else {
      periodCard.append(h('ul', { 'data-testid': 'faults' }, faults.map((f) => {
        const first = f.candidates && f.candidates[0];
        const m = (report.meters || []).find((x) => x.tag === first);
        const unit = m ? m.uom : 'kmol/h';
        return h('li', null, h('strong', { text: f.kind.replace(/_/g, ' ') }), ': ',
          h('span', { class: 'mono', text: (f.candidates || []).join(', ') }),
          ` — ${pmu(f.magnitude, f.magnitude_sigma, unit)}${f.candidates && f.candidates.length > 1 ? ' (for the first; the data cannot tell these apart)' : ''}`);
      })));
    }
    const warns = report.warnings || [];
    periodCard.append(h('h3', { text: `Warnings (${warns.length})` }));
    if (warns.length) periodCard.append(h('ul', null, warns.map((w) => h('li', { text: typeof w === 'string' ? w : (w.message || JSON.stringify(w)) }))));
    else periodCard.append(h('p', { class: 'small muted', text: 'None.' }));
    const un = report.unobservable || [];
    if (un.length) {
      periodCard.append(h('h3', { text: 'Not determined by the meters' }),
        h('p', { class: 'small mono', text: un.join(', ') }));
    }
  }

  function drawPanel() {
    clear(panel);
    panel.append(h('h2', { id: 'stream-panel-h', text: selected ? `Stream ${selected}` : 'Stream' }));
    svg.select(selected);
    if (!selected) {
      panel.append(h('p', { class: 'small muted', text: 'Select a stream in the drawing (click it, or Tab to it and press Enter) to see its flows and composition.' }));
      return;
    }
    const def = (sheet.streams || []).find((x) => x.id === selected);
    const st = report && (report.streams || []).find((x) => x.id === selected);
    if (def) panel.append(h('p', { class: 'small', text: `From ${def.from} to ${def.to}${def.recycle ? ' (recycle)' : ''}` }));
    if (!st) { panel.append(h('p', { class: 'muted', text: 'No report values for this stream.' })); return; }
    if (st.observable === false) panel.append(message('info', 'Unobservable: the meters do not determine this stream\'s total flow this period.'));
    panel.append(h('dl', null,
      h('dt', { text: 'Molar flow' }), h('dd', { text: pmu(st.molar_flow, st.molar_flow_sigma, 'kmol/h') }),
      h('dt', { text: 'Mass flow' }), h('dd', { text: pmu(st.mass_flow, st.mass_flow_sigma, 'kg/h') })));
    const rows = compEntries(st.component_flows).map(([c, v]) => h('tr', null,
      h('th', { scope: 'row', class: 'mono', text: c }),
      h('td', { class: 'n', text: pmu(v, compGet(st.component_flows_sigma, c), 'kmol/h') }),
      h('td', { class: 'n', text: pm(compGet(st.composition, c), compGet(st.composition_sigma, c)) })));
    panel.append(h('div', { class: 'table-wrap' }, h('table', null,
      h('thead', null, h('tr', null, h('th', { scope: 'col', text: 'Comp.' }), h('th', { scope: 'col', class: 'n', text: 'Flow' }), h('th', { scope: 'col', class: 'n', text: 'Mole fraction' }))),
      h('tbody', null, rows))));
    const ms = (report.meters || []).filter((m) => m.stream === selected);
    if (ms.length) {
      panel.append(h('h3', { text: 'Meters on it' }), h('ul', null, ms.map((m) => h('li', null,
        h('a', { href: `#/plant/${encodeURIComponent(plant)}/meters/${encodeURIComponent(m.tag)}`, class: 'mono', text: m.tag }),
        ` ${m.quantity}${m.component ? ` ${m.component}` : ''}: measured ${num(m.measured)} ${m.uom}, reconciled ${pmu(m.reconciled, m.reconciled_sigma, m.uom)}`,
        m.used === false ? ` — not used: ${m.not_used_reason || ''}` : ''))));
    }
  }

  svg.onSelect((id) => {
    selected = id;
    ctx.setQuery({ period: period !== null ? iso(period) : null, mode, component: compSel.value || null, stream: id });
    drawPanel();
  });

  periodSel.addEventListener('change', () => {
    period = parseTime(periodSel.value);
    ctx.setQuery({ period: iso(period), mode, component: compSel.value || null, stream: selected });
    loadReport();
  });
  const step = (d) => {
    const opts = [...periodSel.options];
    const i = periodSel.selectedIndex;
    const j = i - d; // options are newest first
    if (j >= 0 && j < opts.length) { periodSel.selectedIndex = j; periodSel.dispatchEvent(new Event('change')); }
    else if (period !== null) {
      period += d * pms;
      ctx.setQuery({ period: iso(period), mode, stream: selected });
      fillPeriods().then(loadReport);
    }
  };
  prevBtn.addEventListener('click', () => step(-1));
  nextBtn.addEventListener('click', () => step(1));
  radios.addEventListener('change', (e) => {
    if (e.target.name === 'label-mode') mode = e.target.value;
    compSel.disabled = mode !== 'composition';
    ctx.setQuery({ period: period !== null ? iso(period) : null, mode, component: compSel.value || null, stream: selected });
    svg.label(report, mode, compSel.value);
  });

  await fillPeriods();
  await loadReport();
}

function sheetLegend() {
  const sample = (cls, dash, stroke) => s('svg', { width: 34, height: 10, 'aria-hidden': 'true' },
    s('line', { x1: 1, y1: 5, x2: 33, y2: 5, stroke, 'stroke-width': 2.4, 'stroke-dasharray': dash || null, class: cls }));
  return h('ul', { class: 'sheet-legend', 'aria-label': 'Legend' },
    h('li', null, sample('', null, '#2c3e50'), ' stream'),
    h('li', null, sample('', '10 5', '#0072B2'), ' recycle stream (dashed)'),
    h('li', null, sample('', '2 4', '#9a9a9a'), ' unobservable this period (dotted grey)'),
    h('li', null, 'meters: ', ...['ok', 'watch', 'suspect'].map((st) => h('span', null, stateBadge(st), ' '))),
    h('li', { class: 'muted', text: 'values ± 1σ; flows in kmol/h' }));
}

// ---- the SVG drawing ------------------------------------------------------------------------

function buildSheet(sheet, health, plant) {
  const pad = 30;
  const W = sheet.width || 1000;
  const H = sheet.height || 600;
  // Drawn one user unit to one CSS pixel (the card scrolls sideways), or fitted to the width on
  // request; text keeps its size relative to the drawing either way.
  const k = 1;
  const svg = s('svg', {
    id: 'flowsheet', viewBox: `${-pad * k} ${-pad * k} ${W + 2 * pad * k} ${H + 2 * pad * k}`,
    width: W + 2 * pad * k, height: H + 2 * pad * k,
    role: 'group', 'aria-label': `Flowsheet of ${plant}: units, streams and meters`,
  });
  const defs = s('defs');
  const marker = (id, cls) => s('marker', { id, viewBox: '0 0 10 10', refX: 9, refY: 5, markerWidth: 7, markerHeight: 7, orient: 'auto-start-reverse', markerUnits: 'strokeWidth' },
    s('path', { d: 'M0,0 L10,5 L0,10 z', class: cls }));
  defs.append(marker('arrow', 'arrow'), marker('arrow-recycle', 'arrow arrow-recycle'), marker('arrow-unobs', 'arrow arrow-unobs'));
  svg.append(defs);

  const gStreams = s('g', { class: 'streams' });
  const gUnits = s('g', { class: 'units' });
  const gTerms = s('g', { class: 'terminals' });
  const gLabels = s('g', { class: 'labels' });
  const gMeters = s('g', { class: 'meters' });
  svg.append(gStreams, gUnits, gTerms, gLabels, gMeters);

  const listeners = [];
  const streamEls = new Map();
  const labelEls = new Map();

  for (const st of sheet.streams || []) {
    const pts = (st.points || []).map((p) => p.join(',')).join(' ');
    const line = s('polyline', { points: pts, class: 'stream-line', 'marker-end': `url(#${st.recycle ? 'arrow-recycle' : 'arrow'})` });
    const hit = s('polyline', { points: pts, class: 'stream-hit' });
    const g = s('g', {
      class: `stream${st.recycle ? ' recycle' : ''}`, 'data-stream': st.id, tabindex: '0', role: 'button',
      'aria-label': `Stream ${st.id} from ${st.from} to ${st.to}${st.recycle ? ', recycle' : ''}`,
    }, line, hit, s('title', { text: `${st.id}: ${st.from} → ${st.to}` }));
    const pick = () => listeners.forEach((fn) => fn(st.id));
    g.addEventListener('click', pick);
    g.addEventListener('keydown', (e) => { if (e.key === 'Enter' || e.key === ' ') { e.preventDefault(); pick(); } });
    gStreams.append(g);
    streamEls.set(st.id, { g, line, def: st });
    const lab = s('g', { 'data-stream-label': st.id, class: 'stream-label' });
    lab.addEventListener('click', pick);
    gLabels.append(lab);
    labelEls.set(st.id, lab);
  }

  for (const u of sheet.units || []) {
    const g = s('g', { class: `unit unit-${u.kind}`, 'data-unit': u.id, 'data-kind': u.kind },
      unitShape(u),
      s('text', { x: u.x + u.w / 2, y: u.y + u.h + 14 * k, 'text-anchor': 'middle', class: 'unit-name', 'font-size': 12 * k, text: u.id }),
      s('text', { x: u.x + u.w / 2, y: u.y + u.h + 26 * k, 'text-anchor': 'middle', class: 'unit-kind', 'font-size': 10 * k, text: u.kind }),
      s('title', { text: `${u.kind} ${u.id}` }));
    gUnits.append(g);
  }

  for (const t of sheet.terminals || []) {
    const g = s('g', { class: `term term-${t.kind}`, 'data-terminal': t.id });
    if (t.kind === 'feed') {
      g.append(s('path', { d: `M${t.x - 14},${t.y - 9} h18 l10,9 l-10,9 h-18 z`, class: 'term-shape' }));
      g.append(s('text', { x: t.x - 4, y: t.y + 22 * k, 'text-anchor': 'middle', class: 'term-text', 'font-size': 10 * k, text: 'feed' }));
    } else {
      g.append(s('path', { d: `M${t.x - 12},${t.y - 9} h16 l8,9 l-8,9 h-16 l6,-9 z`, class: 'term-shape' }));
      g.append(s('text', { x: t.x, y: t.y + 22 * k, 'text-anchor': 'middle', class: 'term-text', 'font-size': 10 * k, text: 'product' }));
    }
    g.append(s('title', { text: `${t.kind}: stream ${t.stream}` }));
    gTerms.append(g);
  }

  for (const m of sheet.meters || []) {
    const hm = health.get(m.tag);
    const state = hm ? hm.status : 'unknown';
    const info = stateInfo(state);
    const a = s('a', {
      href: `#/plant/${encodeURIComponent(plant)}/meters/${encodeURIComponent(m.tag)}`,
      class: 'meter', 'data-meter': m.tag, 'data-state': state,
      'aria-label': `Meter ${m.tag}, ${m.quantity}${m.component ? ` ${m.component}` : ''}, state ${info.word}`,
    },
    s('circle', { cx: m.x, cy: m.y, r: 8 * k, class: 'meter-dot' }),
    s('text', { x: m.x, y: m.y + 4 * k, 'text-anchor': 'middle', class: 'meter-sym', 'font-size': 11 * k, text: info.sym }),
    // The state word (and the tag, when shown) slant down and to the right, so that the
    // words of meters close together on a stream do not run into each other.
    s('text', { x: m.x + 6 * k, y: m.y + 16 * k, class: 'meter-word', 'font-size': 10 * k, transform: `rotate(35 ${m.x + 6 * k} ${m.y + 16 * k})`, text: `${info.word}${m.component ? ` · ${m.component}` : ''}` }),
    s('text', { x: m.x - 2 * k, y: m.y + 26 * k, class: 'meter-text', 'font-size': 10 * k, transform: `rotate(35 ${m.x - 2 * k} ${m.y + 26 * k})`, text: m.tag }),
    s('title', { text: `${m.tag}: ${m.quantity}${m.component ? ` ${m.component}` : ''} — ${info.word}` }));
    gMeters.append(a);
  }

  function label(report, mode, comp) {
    const streams = new Map(((report && report.streams) || []).map((x) => [x.id, x]));
    const meters = (report && report.meters) || [];
    for (const [id, { g, line, def }] of streamEls) {
      const st = streams.get(id);
      const unobs = st && st.observable === false;
      g.classList.toggle('unobservable', Boolean(unobs));
      line.setAttribute('marker-end', `url(#${unobs ? 'arrow-unobs' : def.recycle ? 'arrow-recycle' : 'arrow'})`);
      const lines = [];
      if (!report) lines.push('no report');
      else if (mode === 'reconciled') {
        lines.push(unobs || st?.molar_flow === null || st?.molar_flow === undefined ? 'unobservable' : pmu(st.molar_flow, st.molar_flow_sigma, 'kmol/h'));
      } else if (mode === 'measured' || mode === 'adjustment') {
        const ms = meters.filter((m) => m.stream === id);
        if (!ms.length) lines.push('not metered');
        for (const m of ms) {
          const what = m.component ? ` ${m.component}` : '';
          if (mode === 'measured') lines.push(`${m.tag}${what}: ${m.measured === null ? 'no reading' : `${num(m.measured)} ${m.uom}`}`);
          else if (m.used === false) lines.push(`${m.tag}: not used`);
          else if (m.redundant === false) lines.push(`${m.tag}: 0 (not redundant)`);
          else lines.push(`${m.tag}: ${pmu(m.adjustment, m.adjustment_sigma, m.uom)}`);
        }
        if (unobs) lines.push('unobservable');
      } else if (mode === 'composition') {
        const v = st ? compGet(st.composition, comp) : null;
        lines.push(v === null || v === undefined ? `${comp || 'component'}: unobservable` : `${comp}: ${pm(v, compGet(st.composition_sigma, comp))} mole fraction`);
      }
      drawLabel(labelEls.get(id), def, lines, unobs, k);
      g.setAttribute('aria-label', `Stream ${id} from ${def.from} to ${def.to}${def.recycle ? ', recycle' : ''}${unobs ? ', unobservable' : ''}: ${lines.join('; ')}`);
    }
  }

  function select(id) {
    for (const [sid, { g }] of streamEls) g.classList.toggle('selected', sid === id);
  }

  return { el: svg, label, select, onSelect: (fn) => listeners.push(fn) };
}

function drawLabel(g, def, lines, unobs, k) {
  clear(g);
  const [lx, ly] = def.label || def.points[0];
  const all = [def.id, ...lines];
  const w = (Math.max(...all.map((t) => t.length)) * 6.3 + 10) * k;
  const hgt = (all.length * 13 + 6) * k;
  const x = lx - w / 2;
  const y = ly - hgt; // above the stream, clear of its line and meters
  g.append(s('rect', { x, y, width: w, height: hgt, class: 'label-box', rx: 3 }));
  all.forEach((t, i) => g.append(s('text', {
    x: lx, y: y + (14 + i * 13) * k, 'text-anchor': 'middle', 'font-size': 11 * k,
    class: i === 0 ? 'label-id' : `label-text${unobs && /unobservable/.test(t) ? ' label-unobs' : ''}`, text: t,
  })));
}

function unitShape(u) {
  const { x, y, w, h: hh } = u;
  const cx = x + w / 2;
  const cy = y + hh / 2;
  const g = s('g');
  switch (u.kind) {
    case 'mixer': // a funnel: two inlets closing to one
      g.append(s('path', { d: `M${x},${y} L${x + w},${cy - hh * 0.18} L${x + w},${cy + hh * 0.18} L${x},${y + hh} Z`, class: 'unit-shape' }));
      break;
    case 'splitter': // an opening wedge
      g.append(s('path', { d: `M${x},${cy - hh * 0.18} L${x + w},${y} L${x + w},${y + hh} L${x},${cy + hh * 0.18} Z`, class: 'unit-shape' }));
      g.append(s('path', { d: `M${x + w * 0.35},${cy} L${x + w},${cy}`, class: 'unit-detail' }));
      break;
    case 'reactor': // a vessel with catalyst beds
      g.append(s('rect', { x, y, width: w, height: hh, rx: w * 0.3, class: 'unit-shape' }));
      for (const f of [0.35, 0.65]) g.append(s('path', { d: `M${x + 4},${y + hh * f} L${x + w - 4},${y + hh * f}`, class: 'unit-detail' }));
      g.append(s('path', { d: `M${x + 6},${y + hh * 0.35} L${x + w - 6},${y + hh * 0.65} M${x + w - 6},${y + hh * 0.35} L${x + 6},${y + hh * 0.65}`, class: 'unit-detail' }));
      break;
    case 'separator': // a drum with a liquid level
      g.append(s('rect', { x, y, width: w, height: hh, rx: w / 2, class: 'unit-shape' }));
      g.append(s('path', { d: `M${x + 3},${y + hh * 0.7} L${x + w - 3},${y + hh * 0.7}`, class: 'unit-detail' }));
      break;
    default: // node: a small circle
      g.append(s('circle', { cx, cy, r: Math.min(w, hh) / 2, class: 'unit-shape' }));
  }
  return g;
}
