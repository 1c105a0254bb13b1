// A printable monthly balance report.
import { api, seg, qs } from '../api.js';
import { h, clear, message, errorBox, ready, utc, iso, num, pmu, parseTime } from '../dom.js';
import { latestStart, model, modelBody } from './common.js';
import { totalsList, vs } from './balances.js';

const CAUTION = 'Reconciled values are statistical estimates with stated uncertainty; a meter the tests flag is a candidate for inspection, not proof of a fault. Purge and operating changes follow the site\'s procedures, local codes and licensed engineering practice.';

function monthBounds(m) {
  const [y, mo] = m.split('-').map(Number);
  return [Date.UTC(y, mo - 1, 1), Date.UTC(y, mo, 1)];
}

export async function render(ctx, view) {
  const plant = ctx.route.plant;
  const P = `/plants/${seg(plant)}`;
  let month = ctx.route.q.month;
  if (!/^\d{4}-\d{2}$/.test(month || '')) {
    const last = await latestStart(plant).catch(() => null);
    const d = new Date(last ?? Date.now());
    month = `${d.getUTCFullYear()}-${String(d.getUTCMonth() + 1).padStart(2, '0')}`;
  }
  const monthIn = h('input', { id: 'report-month', type: 'month', value: month });
  const printBtn = h('button', { type: 'button', class: 'btn', id: 'print', text: 'Print' });
  const form = h('form', { class: 'toolbar no-print', novalidate: true },
    h('div', { class: 'field' }, h('label', { for: 'report-month', text: 'Month (UTC)' }), monthIn),
    h('button', { type: 'submit', class: 'btn btn-primary', text: 'Show' }), printBtn);
  printBtn.addEventListener('click', () => window.print());
  form.addEventListener('submit', (e) => {
    e.preventDefault();
    if (/^\d{4}-\d{2}$/.test(monthIn.value)) location.hash = `#/plant/${encodeURIComponent(plant)}/report?month=${monthIn.value}`;
  });
  view.append(form);

  const [from, to] = monthBounds(month);
  const [mdoc, bal, figs] = await Promise.all([
    model(plant),
    api(`${P}/balances${qs({ from: iso(from), to: iso(to) })}`),
    api(`${P}/figures${qs({ from: iso(from), to: iso(to) })}`),
  ]);
  const mb = modelBody(mdoc);
  const revision = mdoc.revision ?? mb.revision ?? '–';

  view.append(h('div', { class: 'report-head' },
    h('div', null,
      h('h1', { text: `Monthly balance report — ${plant}, ${month}` }),
      h('p', { class: 'lede', text: `From ${utc(from)} to ${utc(to)}. Model ${mb.name || plant}, revision ${revision}${mdoc.stored_at || mdoc.created_at ? ` (stored ${utc(mdoc.stored_at || mdoc.created_at)})` : ''}. Printed ${utc(Date.now())}.` }))));

  // coverage and global test
  const cov = bal.coverage || {};
  let pass = 0; let fail = 0; let none = 0;
  const seen = new Set();
  const first = (figs.series || [])[0];
  for (const p of (first && first.points) || []) {
    if (seen.has(p.period_start)) continue;
    seen.add(p.period_start);
    if (p.global_test_passed === true) pass += 1; else if (p.global_test_passed === false) fail += 1; else none += 1;
  }
  view.append(h('h2', { text: 'Coverage and tests' }), h('dl', { class: 'kv' },
    h('dt', { text: 'Periods covered' }), h('dd', { text: `${cov.covered ?? '–'} of ${cov.periods ?? '–'} (${num(cov.covered_hours)} of ${num(cov.hours)} h)` }),
    h('dt', { text: 'Missing' }), h('dd', { text: String((cov.missing || []).length) }),
    h('dt', { text: 'Not usable' }), h('dd', { text: String((cov.not_usable || []).length) }),
    h('dt', { text: 'Unobservable' }), h('dd', { text: String((cov.unobservable || []).length) }),
    h('dt', { text: 'Global test' }), h('dd', { id: 'report-global', text: first ? `passed in ${pass} of ${pass + fail} tested periods${none ? `; ${none} not tested` : ''}` : 'no figures in the month' })));

  // totals
  const totals = totalsList(bal);
  view.append(h('h2', { text: 'Stream totals' }),
    h('p', { class: 'small', text: 'Σ of reconciled flow × period length; σ = √Σ(σₕ·Δtₕ)², periods independent (a lower bound where a meter is biased). Blank where some period of the month has no value: see coverage.' }),
    h('div', { class: 'table-wrap' }, h('table', { id: 'report-totals' },
      h('thead', null, h('tr', null, ['Stream', 'Amount ± σ', 'Mass ± σ', 'Periods without value'].map((x, i) => h('th', { scope: 'col', class: i ? 'n' : null, text: x })))),
      h('tbody', null, totals.map((t) => {
        const [a, as] = vs(t, 'amount_kmol');
        const [k, ks] = vs(t, 'amount_kg');
        return h('tr', null, h('th', { scope: 'row', class: 'mono', text: t.stream }),
          h('td', { class: 'n', text: a === null ? '–' : pmu(a, as, 'kmol') }),
          h('td', { class: 'n', text: k === null ? '–' : pmu(k, ks, 'kg') }),
          h('td', { class: 'n', text: String(t.periods_without_value ?? 0) }));
      })))));

  // figures' monthly means
  const rows = [];
  for (const ser of figs.series || []) {
    const vals = ser.points.filter((p) => p.value !== null && p.value !== undefined);
    if (!vals.length) continue;
    const mean = vals.reduce((acc, p) => acc + p.value, 0) / vals.length;
    const withS = vals.filter((p) => p.sigma !== null && p.sigma !== undefined);
    const sm = withS.length === vals.length ? Math.sqrt(withS.reduce((acc, p) => acc + p.sigma ** 2, 0)) / vals.length : null;
    rows.push(h('tr', null, h('td', { text: ser.name.replace(/_/g, ' ') }), h('td', { class: 'mono', text: ser.subject }),
      h('td', { class: 'n', text: pmu(mean, sm, ser.uom) }), h('td', { class: 'n', text: `${vals.length} of ${ser.points.length}` })));
  }
  view.append(h('h2', { text: 'Loop figures: monthly mean' }),
    h('p', { class: 'small', text: 'Mean of the hourly values where determined; σ of the mean = √Σσₕ² / n, taking the periods as independent.' }),
    rows.length ? h('div', { class: 'table-wrap' }, h('table', { id: 'report-figures' },
      h('thead', null, h('tr', null, ['Figure', 'Subject', 'Mean ± σ', 'Periods'].map((x, i) => h('th', { scope: 'col', class: i > 1 ? 'n' : null, text: x })))),
      h('tbody', null, rows))) : message('info', 'No figure was determined in this month.'));

  view.append(h('h2', { text: 'Caution' }), h('p', { class: 'report-caution', id: 'report-caution', text: CAUTION }));
}
