// One meter: its history on one time axis, its notes, the note form, its value to a figure.
import { api, seg, qs } from '../api.js';
import { h, clear, message, loading, errorBox, ready, utc, iso, num, pmu, parseTime, stateBadge, toLocalInput, fromLocalInput, TIME_INPUT } from '../dom.js';
import { chart, makeAxis } from '../chart.js';
import { latestStart, plantInfo, periodMs } from './common.js';

const KINDS = [
  ['checked', 'checked — for the record; changes nothing'],
  ['recalibrated', 'recalibrated — starts a fresh history'],
  ['replaced', 'replaced — starts a fresh history'],
  ['out_of_service', 'out of service — left out of the estimate'],
  ['back_in_service', 'back in service — ends the out-of-service interval'],
];
const CUSUM_WATCH = 5;
const CUSUM_SUSPECT = 10;

export async function render(ctx, view) {
  const { plant, tag } = ctx.route;
  const P = `/plants/${seg(plant)}`;
  if (!(ctx.me.may && ctx.me.may.read)) {
    // A maintain token writes notes but may not read the meter's record.
    view.append(h('h1', null, 'Meter ', h('span', { class: 'mono', text: tag }), ' ', h('span', { class: 'muted', text: `on ${plant}` })),
      message('info', `This ${ctx.me.role} token may write notes but not read results, so the meter's history is not shown. The service checks the tag when the note is sent.`));
    if (ctx.me.may && ctx.me.may.maintain) view.append(h('ul', { id: 'notes', class: 'notes-list' }), noteForm(ctx, P, tag, 'the meter\'s unit'));
    return;
  }
  const [m, info] = await Promise.all([api(`${P}/meters/${seg(tag)}`), plantInfo(plant).catch(() => null)]);
  const pms = periodMs(info);
  const uom = m.uom;

  view.append(h('p', { class: 'small' }, h('a', { href: `#/plant/${encodeURIComponent(plant)}/meters`, text: '← All meters' })),
    h('h1', null, 'Meter ', h('span', { class: 'mono', text: m.tag }), ' ', stateBadge(m.status)),
    h('p', { class: 'lede', text: m.reason || '' }));

  const facts = h('dl', { class: 'kv' },
    h('dt', { text: 'Measures' }), h('dd', { text: `${m.quantity}${m.component ? ` of ${m.component}` : ''} on stream ${m.stream}, in ${uom}` }),
    h('dt', { text: 'Bias (pooled)' }), h('dd', { text: m.bias === null || m.bias === undefined ? 'no evidence of a bias' : `${pmu(m.bias, m.bias_sigma, uom)} (positive: reads high)` }),
    h('dt', { text: 'Evidence since' }), h('dd', { text: m.evidence_since ? utc(m.evidence_since) : '–' }),
    h('dt', { text: 'CUSUM now' }), h('dd', { text: `high side ${num(m.cusum_high, 3)}, low side ${num(m.cusum_low, 3)} (watch at ${CUSUM_WATCH}, suspect at ${CUSUM_SUSPECT})` }),
    h('dt', { text: 'Periods' }), h('dd', { text: `${m.periods ?? '–'} in the record, ${m.periods_tested ?? '–'} tested, ${m.periods_flagged ?? '–'} flagged by the period's own test, ${m.periods_missing ?? '–'} missing, ${m.periods_out_of_range ?? '–'} out of range, ${m.periods_bad_quality ?? '–'} with bad readings` }),
    h('dt', { text: 'History since' }), h('dd', { text: m.history_since ? utc(m.history_since) : 'the first period' }),
    h('dt', { text: 'Cannot be told from' }), h('dd', { class: 'mono', text: (m.equivalent || []).length ? m.equivalent.join(', ') : '–' }));
  view.append(h('section', { class: 'card', 'aria-label': 'Meter facts' }, facts));

  if (m.out_of_service_since) {
    const loses = m.loses || [];
    view.append(h('section', { class: 'card' },
      h('h2', { text: 'Out of service' }),
      h('p', { text: `Since ${utc(m.out_of_service_since)}: ${m.out_of_service_note || ''}` }),
      loses.length ? h('ul', null, loses.map((l) => h('li', { text: `${l.name} ${l.subject}: σ ${num(l.sigma)} ${l.uom} now; ${l.sigma_if_lost === null ? 'not determined' : `${num(l.sigma_if_lost)} ${l.uom}`} without the meter` }))) : null,
      (m.unobservable_if_lost || []).length ? h('p', { text: `Left undetermined: ${m.unobservable_if_lost.join(', ')}` }) : null,
      m.loses_judged_on ? h('p', { class: 'small muted', text: `σ judged on the period ${utc(m.loses_judged_on)}.` }) : null));
  }

  // ---- charts on one time axis -----------------------------------------------------------
  const hist = m.history || [];
  const notes = m.notes || [];
  // The measurement test's Šidák-corrected critical value, from the latest period's report
  // (the history does not carry each period's; it changes only with the set of redundant
  // meters). Without a report the chart falls back to ± 1.96.
  let test = null;
  if (hist.length) {
    try {
      const run = await api(`${P}/periods/${seg(iso(parseTime(hist[hist.length - 1].period_start)))}`);
      test = (run.report && run.report.measurement_test) || null;
    } catch (err) {
      if (err.status === 401) return;
    }
  }
  const critical = test ? test.critical : 1.96;
  const criticalLabel = test
    ? `± ${num(test.critical, 3)}: the measurement test's critical value in the latest period (Šidák over ${test.tests} redundant meters, ${num(100 * test.alpha_per_test, 3)} % two-sided each)`
    : '± 1.96: 5 % two-sided per test (no report of the latest period to read the Šidák-corrected value from)';
  view.append(h('h2', { text: 'History' }));
  if (!hist.length) {
    view.append(message('info', 'No reconciled period in this meter\'s record yet.'));
  } else {
    const t0 = parseTime(hist[0].period_start);
    const t1 = parseTime(hist[hist.length - 1].period_start) + pms;
    const axis = makeAxis(t0, t1);
    const X = (p) => parseTime(p.period_start);
    const noteMarks = notes.map((n) => ({ x: parseTime(n.effective_at), label: n.kind.replace(/_/g, ' '), title: `${n.kind}: ${n.text}`, id: n.id }))
      .filter((n) => n.x >= t0 && n.x <= t1);
    const flagged = hist.filter((p) => p.flagged).map(X);
    view.append(h('p', { class: 'small muted', text: 'The three charts share one time axis: zoom (mouse wheel, + and −) or pan (drag, arrow keys) on any of them moves all three.' }));
    view.append(chart({
      title: `Measured and reconciled, ${uom}`, xKind: 'time', axis, yLabel: uom, height: 220, notes: noteMarks,
      series: [
        { label: 'measured', cls: 's2', points: hist.map((p) => ({ x: X(p), v: p.measured })), fmt: (p) => `${num(p.v)} ${uom}` },
        { label: 'reconciled', cls: 's1', points: hist.map((p) => ({ x: X(p), v: p.reconciled })), fmt: (p) => `${num(p.v)} ${uom}` },
      ],
    }).el);
    view.append(chart({
      title: 'Normalised adjustment (adjustment ÷ its σ)', xKind: 'time', axis, yLabel: 'adjustment / σ', height: 200,
      notes: noteMarks, failed: flagged, failedWidth: pms, failedLabel: 'the period\'s measurement test named the meter',
      hlines: [
        { y: critical, label: criticalLabel, tag: `+${num(critical, 3)}` },
        { y: -critical, label: '', legend: false, tag: `−${num(critical, 3)}` },
        { y: 0, label: '', legend: false, cls: 'h-zero' },
      ],
      series: [{ label: 'normalised adjustment', cls: 's1', points: hist.map((p) => ({ x: X(p), v: p.normalized_adjustment })), fmt: (p) => num(p.v, 3) }],
    }).el);
    view.append(chart({
      title: 'CUSUM of the normalised adjustment (larger side)', xKind: 'time', axis, yLabel: 'CUSUM', height: 200, notes: noteMarks,
      hlines: [
        { y: CUSUM_WATCH, label: `watch at ${CUSUM_WATCH}`, cls: 'h-watch', tag: `watch ${CUSUM_WATCH}` },
        { y: CUSUM_SUSPECT, label: `suspect at ${CUSUM_SUSPECT}`, cls: 'h-suspect', tag: `suspect ${CUSUM_SUSPECT}` },
      ],
      series: [{ label: 'CUSUM', cls: 's3', points: hist.map((p) => ({ x: X(p), v: p.cusum })), fmt: (p) => `${num(p.v, 3)} (${hist.find((q) => X(q) === p.x)?.level || ''})` }],
    }).el);
  }

  // ---- notes -----------------------------------------------------------------------------
  const notesSec = h('section', { 'aria-labelledby': 'notes-h' }, h('h2', { id: 'notes-h', text: `Notes (${notes.length})` }));
  const list = h('ul', { id: 'notes', class: 'notes-list' });
  for (const n of notes.slice().reverse()) list.append(noteItem(n, uom));
  if (!notes.length) list.append(h('li', { class: 'muted', text: 'No notes yet.' }));
  notesSec.append(list);
  view.append(notesSec);

  if (ctx.me.may && ctx.me.may.maintain) view.append(noteForm(ctx, P, tag, uom));
  else view.append(h('p', { class: 'small muted', text: `Notes are written with a maintain or admin token; this one is ${ctx.me.role}.` }));

  // ---- meter value -----------------------------------------------------------------------
  view.append(await valueSection(ctx, P, m, pms));
}

function noteItem(n, uom) {
  return h('li', { 'data-note': String(n.id) },
    h('span', { class: 'note-kind', text: n.kind.replace(/_/g, ' ') }),
    ` — effective ${utc(n.effective_at)}; written ${utc(n.created_at)}`,
    n.as_found !== undefined && n.as_found !== null ? h('div', { text: `As found: ${num(n.as_found)} ${uom}${n.estimated_bias !== undefined ? `; loopbal's estimate then: ${pmu(n.estimated_bias, n.estimated_bias_sigma, uom)}` : ''}` }) : null,
    n.as_found === undefined && n.estimated_bias !== undefined ? h('div', { text: `loopbal's estimate then: ${pmu(n.estimated_bias, n.estimated_bias_sigma, uom)}` }) : null,
    h('div', { class: 'note-text', text: n.text || '' }));
}

function noteForm(ctx, P, tag, uom) {
  const kind = h('select', { id: 'note-kind' }, KINDS.map(([v, label]) => h('option', { value: v, text: label })));
  const text = h('textarea', { id: 'note-text', maxlength: '4000', rows: '3' });
  const when = h('input', { id: 'note-effective', ...TIME_INPUT });
  const asFound = h('input', { id: 'note-as-found', type: 'number', step: 'any', inputmode: 'decimal' });
  const asFoundWrap = h('div', { class: 'field' },
    h('label', { for: 'note-as-found', text: `As found (${uom}, positive: read high)` }), asFound);
  const out = h('div', { class: 'wide', 'aria-live': 'polite' });
  const submit = h('button', { type: 'submit', id: 'note-submit', class: 'btn btn-primary', text: 'Add the note' });
  const form = h('form', { id: 'note-form', class: 'card', novalidate: true, 'aria-labelledby': 'note-form-h' },
    h('h2', { id: 'note-form-h', class: 'wide', text: 'Add a note' }),
    h('div', { class: 'field' }, h('label', { for: 'note-kind', text: 'Kind' }), kind),
    h('div', { class: 'field' }, h('label', { for: 'note-effective', text: 'Effective at (UTC, +00:00)' }), when,
      h('span', { class: 'hint', text: 'Empty: now. Out of service and back in service re-run the periods from this time.' })),
    h('div', { class: 'field wide' }, h('label', { for: 'note-text', text: 'Text' }), text),
    asFoundWrap,
    h('div', { class: 'wide' }, submit), out);
  const sync = () => { asFoundWrap.hidden = kind.value !== 'recalibrated'; };
  kind.addEventListener('change', sync);
  sync();
  form.addEventListener('submit', async (e) => {
    e.preventDefault();
    clear(out);
    const body = { kind: kind.value, text: text.value };
    if (when.value) {
      const t = fromLocalInput(when.value);
      if (Number.isNaN(t)) { out.append(message('error', 'The effective time is not a valid date and time.')); return; }
      body.effective_at = iso(t);
    }
    if (kind.value === 'recalibrated' && asFound.value !== '') {
      const v = Number(asFound.value);
      if (!Number.isFinite(v)) { out.append(message('error', 'As found must be a number.')); return; }
      body.as_found = v;
    }
    submit.disabled = true;
    ready(false);
    try {
      const note = await api(`${P}/meters/${seg(tag)}/notes`, { method: 'POST', body });
      out.append(message('ok', `Note ${note.id} stored (${note.kind}, effective ${utc(note.effective_at)}).`));
      const list = document.getElementById('notes');
      if (list) {
        const empty = list.querySelector('li.muted');
        if (empty) empty.remove();
        list.prepend(noteItem(note, uom));
      }
      text.value = '';
      asFound.value = '';
    } catch (err) {
      if (err.status !== 401) out.append(errorBox(err, 'The note was not stored'));
    } finally {
      submit.disabled = false;
      ready(true);
    }
  });
  when.value = '';
  return form;
}

async function valueSection(ctx, P, m, pms) {
  const sec = h('section', { class: 'card', 'aria-labelledby': 'value-h' },
    h('h2', { id: 'value-h', text: 'Worth to the loop\'s figures' }),
    h('p', { class: 'small', text: 'The σ of a figure as reconciled now, if this meter\'s σ were halved (a recalibration or a better transmitter), and if it were lost. Exact for the period\'s linearised estimate.' }));
  const last = m.last_period ? parseTime(m.last_period) : await latestStart(ctx.route.plant).catch(() => null);
  if (last === null || Number.isNaN(last)) { sec.append(message('info', 'No reconciled period to judge on.')); return sec; }
  let series = [];
  try {
    const f = await api(`${P}/figures${qs({ from: iso(last), to: iso(last + pms) })}`);
    series = (f.series || []).filter((x) => x.points && x.points.some((p) => p.sigma !== null && p.sigma !== undefined));
  } catch (err) {
    if (err.status !== 401) sec.append(errorBox(err, 'The figures of the period'));
    return sec;
  }
  const pick = h('select', { id: 'value-figure' }, series.map((x) => h('option', {
    value: `${x.name}:${x.subject}`, text: `${x.name} — ${x.subject} (${x.uom})`,
    selected: x.name === 'purge_fraction',
  })));
  const out = h('div', { 'aria-live': 'polite' });
  sec.append(h('div', { class: 'toolbar' },
    h('div', { class: 'field' }, h('label', { for: 'value-figure', text: 'Figure' }), pick),
    h('p', { class: 'small muted', text: `Period ${utc(last)}` })), out);
  async function load() {
    clear(out).append(loading('Reconciling the period again for the meter value…'));
    ready(false);
    try {
      const v = await api(`${P}/meter-value${qs({ period: iso(last), figure: pick.value })}`);
      clear(out);
      const row = (v.meters || []).find((x) => x.tag === m.tag);
      const fig = v.figure || {};
      const u = fig.uom || '';
      if (!row) {
        out.append(message('info', `${m.tag} was not used in this period, so it has no worth to compute here.`));
      } else {
        out.append(h('table', { id: 'meter-value' },
          h('thead', null, h('tr', null, ['Figure', 'σ now', 'σ if this meter\'s σ halved', 'σ if this meter lost'].map((t) => h('th', { scope: 'col', text: t })))),
          h('tbody', null, h('tr', { 'data-meter-value': m.tag },
            h('td', { text: `${fig.name} ${fig.subject} = ${pmu(fig.value, fig.sigma, u)}` }),
            h('td', { class: 'n', text: `${num(fig.sigma, 3)} ${u}` }),
            h('td', { class: 'n', text: `${num(row.sigma_if_halved, 3)} ${u}` }),
            h('td', { class: 'n', text: row.sigma_if_lost === null || row.sigma_if_lost === undefined ? 'not determined' : `${num(row.sigma_if_lost, 3)} ${u}` })))));
        if ((row.unobservable_if_lost || []).length) out.append(h('p', { class: 'small', text: `Lost, it would leave undetermined: ${row.unobservable_if_lost.join(', ')}.` }));
        if ((row.untestable_if_lost || []).length) out.append(h('p', { class: 'small', text: `Lost, these meters could no longer be tested: ${row.untestable_if_lost.join(', ')}.` }));
        const rank = (v.meters || []).slice().sort((a, b) => (a.sigma_if_halved ?? Infinity) - (b.sigma_if_halved ?? Infinity)).findIndex((x) => x.tag === m.tag);
        out.append(h('p', { class: 'small muted', text: `Among the ${v.meters.length} meters measured this period, halving this one's σ ranks ${rank + 1} for this figure.` }));
      }
    } catch (err) {
      clear(out);
      if (err.status !== 401) out.append(errorBox(err, 'Meter value'));
    } finally { ready(true); }
  }
  pick.addEventListener('change', load);
  if (series.length) await load();
  else sec.append(message('info', 'No figure with a σ in that period.'));
  return sec;
}
