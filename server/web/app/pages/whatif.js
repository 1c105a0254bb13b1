// Purge what-if: sweep a splitter outlet's fraction from a reconciled base case, with σ bands.
import { api, seg } from '../api.js';
import { h, clear, message, loading, errorBox, ready, utc, iso, num, pmu, parseTime, toLocalInput, fromLocalInput, TIME_INPUT, table } from '../dom.js';
import { chart } from '../chart.js';
import { latestStart, model, modelBody, listOf } from './common.js';

const CURVES = [
  { name: 'product_made', title: 'Product made', unit: 'kmol/h', filter: () => true },
  { name: 'reactant_lost_in_purge', title: 'Reactant lost in the purge', unit: 'kmol/h', filter: (subj, stream) => subj.startsWith(`${stream}:`) },
  { name: 'inert_fraction_reactor_inlet', title: 'Inert fraction at the reactor inlet', unit: 'fraction', filter: () => true },
  { name: 'recycle_ratio', title: 'Recycle ratio', unit: 'ratio', filter: () => true },
];

export async function render(ctx, view) {
  const plant = ctx.route.plant;
  const P = `/plants/${seg(plant)}`;
  const [mdoc, last] = await Promise.all([model(plant), latestStart(plant)]);
  const mb = modelBody(mdoc);
  const units = listOf(mb, 'unit');
  const streams = listOf(mb, 'stream');
  const comps = listOf(mb, 'component');
  const splitters = new Set(units.filter((u) => u.kind === 'splitter').map((u) => u.id));
  const outlets = streams.filter((x) => splitters.has(x.from));
  const reactors = units.filter((u) => u.kind === 'reactor');

  view.append(h('h1', null, 'Purge what-if ', h('span', { class: 'muted mono', text: plant })),
    h('p', { class: 'lede', text: 'The loop\'s new steady state as one splitter outlet\'s fraction is swept, from the reconciled base case of a period (or a range of periods), every value with σ carried from the base case. It informs a decision; the site\'s procedures decide it.' }));
  if (!outlets.length) { view.append(message('info', 'The model has no splitter, so there is no split to sweep.')); return; }

  const defaultOutlet = (outlets.find((x) => x.to === 'outside') || outlets[0]).id;
  const outletSel = h('select', { id: 'wi-outlet' }, outlets.map((x) => h('option', { value: x.id, text: `${x.id} (of ${x.from}, to ${x.to})`, selected: x.id === defaultOutlet })));
  const baseIn = h('input', { id: 'wi-period', ...TIME_INPUT, value: last !== null ? toLocalInput(last) : '' });
  const baseTo = h('input', { id: 'wi-period-to', ...TIME_INPUT });
  const sFrom = h('input', { id: 'wi-from', type: 'number', step: 'any', min: '0', max: '1', value: '0.02' });
  const sTo = h('input', { id: 'wi-to', type: 'number', step: 'any', min: '0', max: '1', value: '0.2' });
  const sN = h('input', { id: 'wi-points', type: 'number', step: '1', min: '2', max: '1000', value: '10' });
  const econ = h('fieldset', { class: 'econ' }, h('legend', { text: 'Economics (optional; one currency throughout, per kmol)' }));
  const priceRows = [];
  const econGrid = h('div', { class: 'toolbar' });
  for (const c of comps) {
    const price = h('input', { type: 'number', step: 'any', min: '0', id: `wi-price-${c.id}`, class: 'narrow', 'data-price': c.id });
    const loss = h('input', { type: 'number', step: 'any', min: '0', id: `wi-loss-${c.id}`, class: 'narrow', 'data-loss': c.id });
    priceRows.push({ c: c.id, price, loss });
    econGrid.append(h('div', { class: 'field' },
      h('span', { class: 'mono', text: c.id }),
      h('label', { for: price.id, text: 'price made' }), price,
      h('label', { for: loss.id, text: 'value lost in the purge' }), loss));
  }
  const recycle = h('input', { id: 'wi-recycle-cost', type: 'number', step: 'any', min: '0' });
  const limUnit = h('select', { id: 'wi-lim-unit' }, [h('option', { value: '', text: '(no limit)' }), ...reactors.map((u) => h('option', { value: u.id, text: u.id }))]);
  const limComp = h('select', { id: 'wi-lim-comp' }, comps.filter((c) => c.inert).concat(comps.filter((c) => !c.inert)).map((c) => h('option', { value: c.id, text: c.id })));
  const limMax = h('input', { id: 'wi-lim-max', type: 'number', step: 'any', min: '0', max: '1' });
  econ.append(econGrid, h('div', { class: 'toolbar' },
    h('div', { class: 'field' }, h('label', { for: 'wi-recycle-cost', text: 'Recycle cost, per kmol recycled' }), recycle),
    h('div', { class: 'field' }, h('label', { for: 'wi-lim-unit', text: 'Inlet limit: reactor' }), limUnit),
    h('div', { class: 'field' }, h('label', { for: 'wi-lim-comp', text: 'component' }), limComp),
    h('div', { class: 'field' }, h('label', { for: 'wi-lim-max', text: 'max mole fraction' }), limMax)));

  const run = h('button', { type: 'submit', class: 'btn btn-primary', id: 'wi-run', text: 'Compute the sweep' });
  const form = h('form', { id: 'what-if-form', novalidate: true },
    h('div', { class: 'toolbar' },
      h('div', { class: 'field' }, h('label', { for: 'wi-outlet', text: 'Splitter outlet' }), outletSel),
      h('div', { class: 'field' }, h('label', { for: 'wi-period', text: 'Base period (UTC)' }), baseIn),
      h('div', { class: 'field' }, h('label', { for: 'wi-period-to', text: 'Base range to (optional, UTC)' }), baseTo),
      h('div', { class: 'field' }, h('label', { for: 'wi-from', text: 'Split from' }), sFrom),
      h('div', { class: 'field' }, h('label', { for: 'wi-to', text: 'Split to' }), sTo),
      h('div', { class: 'field' }, h('label', { for: 'wi-points', text: 'Points' }), sN)),
    econ, h('p', null, run));
  const status = h('div', { 'aria-live': 'polite' });
  const out = h('div');
  view.append(form, status, out);

  form.addEventListener('submit', async (e) => {
    e.preventDefault();
    clear(status);
    const period = fromLocalInput(baseIn.value);
    const periodTo = baseTo.value ? fromLocalInput(baseTo.value) : null;
    const a = Number(sFrom.value);
    const b = Number(sTo.value);
    const n = Math.round(Number(sN.value));
    const errs = [];
    if (Number.isNaN(period)) errs.push('Give the base period.');
    if (periodTo !== null && (Number.isNaN(periodTo) || periodTo < period)) errs.push('The base range must end after its start.');
    if (!(a >= 0 && a <= 1 && b >= 0 && b <= 1 && a < b)) errs.push('The split sweep runs between two fractions in [0, 1], from the smaller.');
    if (!(n >= 2 && n <= 1000)) errs.push('Points: 2 to 1000.');
    if (errs.length) { status.append(message('error', errs.join(' '))); return; }
    const body = { period: iso(period), sweep: { name: `split:${outletSel.value}`, from: a, to: b, points: n } };
    if (periodTo !== null) body.period_to = iso(periodTo);
    const economics = {};
    const price = {}; const lossV = {};
    for (const r of priceRows) {
      if (r.price.value !== '') price[r.c] = Number(r.price.value);
      if (r.loss.value !== '') lossV[r.c] = Number(r.loss.value);
    }
    if (Object.keys(price).length) economics.product_price = price;
    if (Object.keys(lossV).length) economics.loss_value = lossV;
    if (recycle.value !== '') economics.recycle_cost = Number(recycle.value);
    if (limUnit.value && limMax.value !== '') economics.max_inlet_fraction = { unit: limUnit.value, component: limComp.value, max: Number(limMax.value) };
    if (Object.keys(economics).length) {
      if (!economics.product_price && !economics.loss_value && economics.recycle_cost === undefined) {
        status.append(message('error', 'An inlet limit needs prices, loss values or a recycle cost too: it bounds the economic optimum.'));
        return;
      }
      body.economics = economics;
    }
    run.disabled = true;
    ready(false);
    clear(out).append(loading('Solving the steady states (the base periods are reconciled again)…'));
    try {
      const [ans, base] = await Promise.all([
        api(`${P}/what-if`, { method: 'POST', body }),
        api(`${P}/periods/${seg(iso(periodTo ?? period))}`).catch(() => null),
      ]);
      clear(out);
      drawAnswer(out, ans, base && base.report, outletSel.value, [a, b]);
    } catch (err) {
      clear(out);
      if (err.status !== 401) status.append(errorBox(err, 'What-if'));
    } finally {
      run.disabled = false;
      ready(true);
    }
  });
}

function drawAnswer(out, ans, baseReport, outlet, dom) {
  const sweepName = `split:${outlet}`;
  const points = ans.points || [];
  const xs = points.map((p) => (p.settings ? p.settings[sweepName] : null));
  const baseSplit = baseReport && (baseReport.split_fractions || []).find((x) => x.stream === outlet);
  const b = ans.base || {};
  out.append(h('h2', { text: 'Base case' }),
    h('p', { text: `From ${utc(b.period_start)}${b.period_last ? ` to ${utc(b.period_last)} (${b.periods} periods combined${(b.skipped || []).length ? `, ${b.skipped.length} skipped: not reconciled` : ''})` : ''}; status ${b.status || '–'}.${baseSplit ? ` The base's split of ${outlet}: ${pmu(baseSplit.value, baseSplit.sigma, 'fraction')}.` : ''}` }),
    h('ul', { class: 'small' }, (ans.holds || []).map((x) => h('li', { text: `held: ${x}` }))));
  const vlines = [];
  if (baseSplit && baseSplit.value !== null) vlines.push({ x: baseSplit.value, label: `base case: split ${num(baseSplit.value, 3)} (the base period's reconciled split)`, tag: 'base', cls: 'v-base', data: { base: '' } });
  const opt = ans.optimum;
  if (opt && opt.value !== undefined && opt.value !== null) vlines.push({ x: opt.value, label: `economic optimum: split ${num(opt.value, 3)}, margin ${pmu(opt.margin, opt.margin_sigma, 'per hour')}${opt.bound ? ` (${opt.bound})` : ''}`, tag: 'optimum', cls: 'v-opt', data: { optimum: '' } });
  if (opt) {
    out.append(h('p', { class: 'msg msg-info', id: 'wi-optimum', text: `Optimum: ${opt.setting || sweepName} = ${num(opt.value, 4)}, margin ${pmu(opt.margin, opt.margin_sigma, 'per hour')}${opt.bound ? `, on the bound: ${typeof opt.bound === 'string' ? opt.bound : JSON.stringify(opt.bound)}` : ''}.` }));
  }
  const noSteady = points.filter((p) => p.status !== 'solved');
  if (noSteady.length) {
    out.append(h('h3', { text: `Points without a steady state (${noSteady.length})` }),
      h('ul', null, noSteady.map((p) => h('li', { text: `${sweepName} = ${num(p.settings ? p.settings[sweepName] : null, 4)}: ${p.reason || p.status}` }))));
  }
  const grid = h('div', { class: 'chart-stack' });
  out.append(h('h2', { text: 'Trade-off' }), grid);
  for (const curve of CURVES) {
    const subjects = new Set();
    for (const p of points) for (const f of p.figures || []) if (f.name === curve.name && curve.filter(f.subject, outlet)) subjects.add(f.subject);
    if (!subjects.size) continue;
    let unit = curve.unit;
    const series = [...subjects].slice(0, 5).map((subj, i) => ({
      label: subj, cls: `s${i + 1}`, band: true, markers: true,
      points: points.map((p, j) => {
        const f = (p.figures || []).find((x) => x.name === curve.name && x.subject === subj);
        if (f && f.uom) unit = f.uom;
        return { x: xs[j], v: p.status === 'solved' && f ? f.value : null, s: f ? f.sigma : null };
      }),
      fmt: (p) => pmu(p.v, p.s, unit),
    }));
    grid.append(chart({ title: `${curve.title}, ${unit}`, xKind: 'num', xDomain: dom, xLabel: `split fraction of ${outlet}`, yLabel: unit, height: 280, series, vlines, id: `wi-${curve.name}` }).el);
  }
  // the numbers
  const names = CURVES.map((c) => c.name);
  const rows = [];
  points.forEach((p, j) => {
    for (const f of p.figures || []) {
      if (!names.includes(f.name)) continue;
      if (f.name === 'reactant_lost_in_purge' && !f.subject.startsWith(`${outlet}:`)) continue;
      rows.push([num(xs[j], 4), p.status, f.name, f.subject, pmu(f.value, f.sigma, f.uom)]);
    }
  });
  out.append(h('details', null, h('summary', { text: 'The numbers' }),
    h('div', { class: 'table-wrap' }, table(['Split', 'Status', 'Figure', 'Subject', 'Value ± σ'], rows, { class: 'dense', id: 'wi-table' }))));
  if (ans.caution) out.append(h('p', { class: 'small report-caution', text: ans.caution }));
}
