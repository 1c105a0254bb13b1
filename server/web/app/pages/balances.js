// Balances over a range: stream totals with σ, per-period flows, coverage, and per unit
// in − out per component beside the raw imbalance of the measured flows.
import { api, seg, qs } from '../api.js';
import { h, clear, message, errorBox, ready, utc, iso, num, pm, pmu, HOUR, parseTime, toLocalInput, fromLocalInput, TIME_INPUT, download, csv } from '../dom.js';
import { latestStart, plantInfo, periodMs, model, modelBody, listOf } from './common.js';

export function compMap(obj) {
  if (!obj) return {};
  if (Array.isArray(obj)) return Object.fromEntries(obj.map((e) => [e.component ?? e.id, e.value ?? e]));
  return obj;
}

/** The value and σ of a total, accepting {value, sigma} objects or bare numbers with a _sigma sibling. */
export function vs(obj, key) {
  if (!obj) return [null, null];
  const v = obj[key];
  if (v && typeof v === 'object' && 'value' in v) return [v.value, v.sigma];
  return [v ?? null, obj[`${key}_sigma`] ?? null];
}

/** Per component {value, sigma} of a total's component amounts. */
export function compAmounts(total) {
  const raw = total.component_amounts_kmol;
  const sig = total.component_amounts_kmol_sigma;
  const out = {};
  if (!raw) return out;
  for (const [c, v] of Object.entries(compMap(raw))) {
    if (v && typeof v === 'object' && 'value' in v) out[c] = { v: v.value, s: v.sigma };
    else out[c] = { v, s: sig ? compMap(sig)[c] ?? null : null };
  }
  return out;
}

export function totalsList(bal) {
  const t = bal.totals || [];
  const list = Array.isArray(t) ? t : Array.isArray(t.streams) ? t.streams
    : Object.entries(t).filter(([, v]) => v && typeof v === 'object').map(([stream, v]) => ({ stream, ...v }));
  return list.map((x) => ({ ...x, stream: x.stream ?? x.id }));
}

export async function render(ctx, view) {
  const plant = ctx.route.plant;
  const q = ctx.route.q;
  const P = `/plants/${seg(plant)}`;
  const [last, info, mdoc] = await Promise.all([latestStart(plant), plantInfo(plant).catch(() => null), model(plant)]);
  const pms = periodMs(info);
  const end = (last ?? Math.floor(Date.now() / HOUR) * HOUR) + pms;
  let from = q.from ? parseTime(q.from) : end - 24 * HOUR;
  let to = q.to ? parseTime(q.to) : end;
  const mb = modelBody(mdoc);

  view.append(h('h1', null, 'Balances ', h('span', { class: 'muted mono', text: plant })),
    h('p', { class: 'lede', text: 'Amounts over a range from the reconciled flows of each period, with σ, and each unit\'s balance per component.' }));
  const fromIn = h('input', { id: 'bal-from', ...TIME_INPUT, value: toLocalInput(from) });
  const toIn = h('input', { id: 'bal-to', ...TIME_INPUT, value: toLocalInput(to) });
  const csvBtn = h('button', { type: 'button', class: 'btn', id: 'bal-csv', text: 'Download CSV' });
  const form = h('form', { class: 'toolbar', novalidate: true },
    h('div', { class: 'field' }, h('label', { for: 'bal-from', text: 'From (UTC)' }), fromIn),
    h('div', { class: 'field' }, h('label', { for: 'bal-to', text: 'To (UTC)' }), toIn),
    h('button', { type: 'submit', class: 'btn btn-primary', text: 'Show' }), csvBtn);
  const status = h('div');
  const out = h('div');
  view.append(form, status, out);
  let bal = null;

  async function load() {
    ready(false);
    clear(status);
    clear(out);
    ctx.setQuery({ from: iso(from), to: iso(to) });
    let raw = null;
    try {
      [bal, raw] = await Promise.all([
        api(`${P}/balances${qs({ from: iso(from), to: iso(to) })}`),
        api(`${P}/figures${qs({ from: iso(from), to: iso(to), name: 'raw_imbalance' })}`).catch(() => null),
      ]);
    } catch (err) {
      bal = null;
      if (err.status !== 401) status.append(errorBox(err, 'Balances'));
      ready(true);
      return;
    }
    drawAll(bal, raw);
    ready(true);
  }

  function drawAll(b, raw) {
    const cov = b.coverage || {};
    out.append(h('h2', { text: 'Coverage' }),
      h('dl', { class: 'kv', id: 'coverage' },
        h('dt', { text: 'Range' }), h('dd', { text: `${utc(from)} to ${utc(to)}` }),
        h('dt', { text: 'Periods' }), h('dd', { text: `${cov.covered ?? '–'} of ${cov.periods ?? '–'} covered (${num(cov.covered_hours)} of ${num(cov.hours)} h)` }),
        h('dt', { text: 'Missing' }), h('dd', { text: listTimes(cov.missing) }),
        h('dt', { text: 'Not usable' }), h('dd', { text: (cov.not_usable || []).length ? cov.not_usable.map((x) => `${utc(x.period_start || x.start || x, false)} (${x.status || ''})`).join('; ') : 'none' }),
        h('dt', { text: 'Unobservable' }), h('dd', { text: (cov.unobservable || []).length ? cov.unobservable.map((x) => `${utc(x.period_start || x.start || x, false)}: ${(x.streams || []).join(', ')}`).join('; ') : 'none' })));

    // totals
    const totals = totalsList(b);
    out.append(h('h2', { text: 'Stream totals over the range' }),
      h('p', { class: 'small', text: 'σ of a total is √Σ(σₕ·Δtₕ)², periods taken as independent. A biased meter repeats its error every period, so where a meter is suspect read the σ of a long total as a lower bound. A total is blank when some period of the range has no value for the stream.' }));
    const trows = totals.map((t) => {
      const [a, as] = vs(t, 'amount_kmol');
      const [k, ks] = vs(t, 'amount_kg');
      return h('tr', { 'data-total': t.stream },
        h('th', { scope: 'row', class: 'mono', text: t.stream }),
        h('td', { class: 'n', text: a === null ? '–' : pmu(a, as, 'kmol') }),
        h('td', { class: 'n', text: k === null ? '–' : pmu(k, ks, 'kg') }),
        h('td', { class: 'n', text: String(t.periods_without_value ?? 0) }));
    });
    out.append(h('div', { class: 'table-wrap' }, h('table', { id: 'totals' },
      h('thead', null, h('tr', null, ['Stream', 'Amount ± σ', 'Mass ± σ', 'Periods without value'].map((x, i) => h('th', { scope: 'col', class: i ? 'n' : null, text: x })))),
      h('tbody', null, trows))));

    // unit balances
    out.append(h('h2', { text: 'Unit balances per component' }),
      h('p', { class: 'small', text: 'In − out over the range, from the stream totals above; σ combines the streams\' σ in quadrature, assuming their errors are independent (the reconciled flows are in fact correlated, so this σ is approximate). A reactor\'s in − out is what its reactions consumed (negative: produced). "Raw" is the same balance from the measured flows (the reports\' raw_imbalance), where the meters give every stream of the balance.' }));
    const totalsBy = new Map(totals.map((t) => [t.stream, compAmounts(t)]));
    const rawBy = rawSums(raw);
    const units = listOf(mb, 'unit');
    const streams = listOf(mb, 'stream');
    const comps = listOf(mb, 'component').map((c) => c.id);
    const urows = [];
    for (const u of units) {
      const ins = streams.filter((x) => x.to === u.id).map((x) => x.id);
      const outs = streams.filter((x) => x.from === u.id).map((x) => x.id);
      for (const c of comps) {
        let v = 0;
        let s2 = 0;
        let missing = false;
        let carried = false;
        for (const [list, sign] of [[ins, 1], [outs, -1]]) {
          for (const sid of list) {
            const amt = (totalsBy.get(sid) || {})[c];
            if (!amt) continue;
            carried = true;
            if (amt.v === null || amt.v === undefined) { missing = true; continue; }
            v += sign * amt.v;
            s2 += (amt.s || 0) ** 2;
          }
        }
        if (!carried) continue;
        const r = rawBy.get(`${u.id}:${c}`);
        urows.push(h('tr', { 'data-balance': `${u.id}:${c}` },
          h('th', { scope: 'row', class: 'mono', text: u.id }),
          h('td', { text: u.kind }),
          h('td', { class: 'mono', text: c }),
          h('td', { class: 'n', text: missing ? 'not determined' : pmu(v, Math.sqrt(s2), 'kmol') }),
          h('td', { class: 'n', text: r ? `${pmu(r.v, Math.sqrt(r.s2), 'kmol')}${r.partial ? ` (${r.n} of ${r.total} periods)` : ''}` : 'not metered' })));
      }
    }
    out.append(h('div', { class: 'table-wrap' }, h('table', { id: 'unit-balances' },
      h('thead', null, h('tr', null, ['Unit', 'Kind', 'Component', 'In − out ± σ (reconciled)', 'Raw in − out ± σ (measured)'].map((x, i) => h('th', { scope: 'col', class: i > 2 ? 'n' : null, text: x })))),
      h('tbody', null, urows))));

    // per-period flows
    const periods = b.periods || [];
    const ids = totals.map((t) => t.stream);
    out.append(h('h2', { text: 'Molar flow per period, kmol/h' }));
    const shown = periods.slice(0, 400);
    if (periods.length > shown.length) out.append(message('info', `Showing the first ${shown.length} of ${periods.length} periods; the CSV has them all.`));
    const prow = shown.map((p) => {
      const sm = streamMap(p.streams);
      return h('tr', null,
        h('th', { scope: 'row', text: utc(p.period_start || p.start, false) }),
        h('td', { text: p.status }),
        ids.map((id) => { const st = sm[id]; return h('td', { class: 'n', text: st && st.molar_flow !== null && st.molar_flow !== undefined ? pm(st.molar_flow, st.molar_flow_sigma) : '–' }); }));
    });
    out.append(h('div', { class: 'table-wrap' }, h('table', { class: 'dense', id: 'period-flows' },
      h('thead', null, h('tr', null, h('th', { scope: 'col', text: 'Period start (UTC)' }), h('th', { scope: 'col', text: 'Status' }), ids.map((id) => h('th', { scope: 'col', class: 'n mono', text: id })))),
      h('tbody', null, prow))));
  }

  form.addEventListener('submit', (e) => {
    e.preventDefault();
    const a = fromLocalInput(fromIn.value);
    const b = fromLocalInput(toIn.value);
    clear(status);
    if (Number.isNaN(a) || Number.isNaN(b) || !(a < b)) { status.append(message('error', 'Give a From time before the To time.')); return; }
    from = a; to = b;
    load();
  });
  csvBtn.addEventListener('click', () => {
    if (!bal) return;
    download(`${plant}-balances-${iso(from).slice(0, 13)}-${iso(to).slice(0, 13)}.csv`, balancesCsv(bal));
  });
  await load();
}

function listTimes(list) {
  if (!list || !list.length) return 'none';
  const shown = list.slice(0, 12).map((t) => utc(t.period_start || t.start || t, false));
  return `${list.length}: ${shown.join(', ')}${list.length > 12 ? ', …' : ''}`;
}

export function streamMap(streams) {
  if (!streams) return {};
  if (Array.isArray(streams)) return Object.fromEntries(streams.map((x) => [x.id || x.stream, x]));
  return streams;
}

/** Σ raw_imbalance·Δt per unit:component from the figures' series (kmol). */
function rawSums(raw) {
  const out = new Map();
  if (!raw) return out;
  const dt = (raw.period_seconds || 3600) / 3600;
  for (const ser of raw.series || []) {
    if (ser.name !== 'raw_imbalance') continue;
    let v = 0; let s2 = 0; let n = 0;
    for (const p of ser.points) {
      if (p.value === null || p.value === undefined) continue;
      v += p.value * dt; s2 += ((p.sigma || 0) * dt) ** 2; n += 1;
    }
    if (n) out.set(ser.subject, { v, s2, n, total: ser.points.length, partial: n < ser.points.length });
  }
  return out;
}

/** The balances as CSV: totals then per-period flows, text cells neutralised. */
export function balancesCsv(b) {
  const rows = [];
  for (const t of totalsList(b)) {
    const [a, as] = vs(t, 'amount_kmol');
    const [k, ks] = vs(t, 'amount_kg');
    rows.push(['total', '', t.stream, '', a, as, 'kmol', t.periods_without_value ?? '']);
    rows.push(['total', '', t.stream, '', k, ks, 'kg', t.periods_without_value ?? '']);
    for (const [c, x] of Object.entries(compAmounts(t))) rows.push(['total', '', t.stream, c, x.v, x.s, 'kmol', '']);
  }
  for (const p of b.periods || []) {
    for (const [id, st] of Object.entries(streamMap(p.streams))) {
      rows.push(['period', p.period_start || p.start, id, '', st.molar_flow, st.molar_flow_sigma, 'kmol/h', p.status]);
      rows.push(['period', p.period_start || p.start, id, '', st.mass_flow, st.mass_flow_sigma, 'kg/h', p.status]);
      const cf = compMap(st.component_flows);
      const cs = compMap(st.component_flows_sigma);
      for (const [c, v] of Object.entries(cf)) rows.push(['period', p.period_start || p.start, id, c, v, cs[c] ?? '', 'kmol/h', p.status]);
    }
  }
  return csv(['row', 'period_start', 'stream', 'component', 'value', 'sigma', 'unit', 'note'], rows, [0, 1, 2, 3, 6, 7]);
}
