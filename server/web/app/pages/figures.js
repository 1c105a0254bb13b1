// Figures: one loop figure over a range, with its σ band, zoom and pan, failed tests marked.
import { api, seg, qs } from '../api.js';
import { h, clear, message, errorBox, ready, utc, iso, num, pmu, HOUR, parseTime, toLocalInput, fromLocalInput, TIME_INPUT, download } from '../dom.js';
import { chart, makeAxis } from '../chart.js';
import { latestStart, plantInfo, periodMs } from './common.js';

export async function render(ctx, view) {
  const plant = ctx.route.plant;
  const q = ctx.route.q;
  const P = `/plants/${seg(plant)}`;
  const [last, info] = await Promise.all([latestStart(plant), plantInfo(plant).catch(() => null)]);
  const pms = periodMs(info);
  const end = (last ?? Math.floor(Date.now() / HOUR) * HOUR) + pms;
  let from = q.from ? parseTime(q.from) : end - 7 * 24 * HOUR;
  let to = q.to ? parseTime(q.to) : end;

  view.append(h('h1', null, 'Loop figures ', h('span', { class: 'muted mono', text: plant })),
    h('p', { class: 'lede', text: 'A figure of the reconciled loop over time. The line is the value, the shaded band ± 1σ; gaps are periods where the figure could not be determined; hatched columns mark periods whose global test failed.' }));

  const fromIn = h('input', { id: 'fig-from', ...TIME_INPUT, value: toLocalInput(from) });
  const toIn = h('input', { id: 'fig-to', ...TIME_INPUT, value: toLocalInput(to) });
  const nameSel = h('select', { id: 'fig-name' });
  const subjSel = h('select', { id: 'fig-subject' });
  const show = h('button', { type: 'submit', class: 'btn btn-primary', id: 'fig-show', text: 'Show' });
  const csvBtn = h('button', { type: 'button', class: 'btn', id: 'fig-csv', text: 'Download CSV (full resolution)' });
  const form = h('form', { class: 'toolbar', novalidate: true },
    h('div', { class: 'field' }, h('label', { for: 'fig-from', text: 'From (UTC)' }), fromIn),
    h('div', { class: 'field' }, h('label', { for: 'fig-to', text: 'To (UTC)' }), toIn),
    h('div', { class: 'field' }, h('label', { for: 'fig-name', text: 'Figure' }), nameSel),
    h('div', { class: 'field' }, h('label', { for: 'fig-subject', text: 'Subject' }), subjSel),
    show, csvBtn);
  const status = h('div');
  const out = h('div');
  view.append(form, status, out);

  let data = null;

  // The names and subjects the range has: the last period's list first (a cheap request),
  // then the chosen figure alone over the range, thinned by the service, whose answer names
  // every figure of the range. A year of every figure at once would be twenty series.
  async function load() {
    ready(false);
    clear(status);
    clear(out);
    const width = Math.max(300, Math.min(1600, Math.round((view.clientWidth || document.getElementById('main').clientWidth || 960))));
    // The range thinned to the chart's width: one figure, or (`name` empty) every figure.
    const over = (name) => api(`${P}/figures${qs({ from: iso(from), to: iso(to), name, points: width })}`);
    // The figure to show when none is chosen, or the chosen one is not in the range: the purge
    // fraction if the range's last period has it, else that period's first figure.
    const fallback = async () => {
      const last = await api(`${P}/figures${qs({ from: iso(Math.max(from, to - pms)), to: iso(to) })}`);
      const names0 = last.names || [];
      return names0.includes('purge_fraction') ? 'purge_fraction' : names0[0];
    };
    try {
      let want = nameSel.value || q.name || await fallback();
      data = await over(want).catch(async (err) => {
        // A figure the range does not have (a stale address): the fallback's instead.
        if (!want || err.status !== 404) throw err;
        want = await fallback();
        return over(want);
      });
      const names = data.names || [...new Set((data.series || []).map((x) => x.name))];
      clear(nameSel);
      for (const n of names) nameSel.append(h('option', { value: n, text: n.replace(/_/g, ' '), selected: n === want }));
    } catch (err) {
      data = null;
      if (err.status !== 401) status.append(errorBox(err, 'Figures'));
      ready(true);
      return;
    }
    fillSubjects(q.subject);
    draw();
    ready(true);
  }

  function fillSubjects(wantSubject) {
    const want = wantSubject || subjSel.value;
    const subs = (data.series || []).filter((x) => x.name === nameSel.value).map((x) => x.subject);
    clear(subjSel);
    for (const sname of subs) subjSel.append(h('option', { value: sname, text: sname, selected: sname === want }));
  }

  function draw() {
    clear(out);
    if (!data) return;
    const ser = (data.series || []).find((x) => x.name === nameSel.value && x.subject === subjSel.value);
    ctx.setQuery({ from: iso(from), to: iso(to), name: nameSel.value, subject: subjSel.value });
    if (!ser) { out.append(message('info', 'No series for this figure in the range.')); return; }
    const pts = ser.points.map((p) => ({ x: parseTime(p.period_start), v: p.value, s: p.sigma, g: p.global_test_passed }));
    const failed = [...new Set(pts.filter((p) => p.g === false).map((p) => p.x))];
    const valued = pts.filter((p) => p.v !== null && p.v !== undefined);
    const gaps = pts.length - valued.length;
    const axis = makeAxis(from, to);
    const c = chart({
      id: 'trend', title: `${ser.name.replace(/_/g, ' ')} — ${ser.subject}, ${ser.uom}`, xKind: 'time', axis,
      yLabel: ser.uom, height: 340, failed, failedWidth: data.bucket_seconds ? data.bucket_seconds * 1000 : pms,
      series: [{ label: `${ser.name} ${ser.subject}`, cls: 's1', band: true, points: pts, fmt: (p) => pmu(p.v, p.s, ser.uom) }],
    });
    out.append(c.el);
    const facts = [];
    facts.push(`${data.periods ?? pts.length} periods from ${utc(from)} to ${utc(to)}.`);
    if (data.bucket_seconds) facts.push(`Long range: the service decimated the series to buckets of ${num(data.bucket_seconds / 3600, 3)} h, each shown by its lowest and highest value (so spikes stay visible). Narrow the range, or use "Load this view", for every period; the CSV download always has every period.`);
    else facts.push('Every period is shown (not decimated).');
    if (gaps) facts.push(`${gaps} point${gaps === 1 ? '' : 's'} without a value (no run, not converged or not determined) are shown as gaps.`);
    facts.push(`${failed.length} ${data.bucket_seconds ? 'points' : 'periods'} with a failed global test.`);
    if (valued.length) {
      const lastP = valued[valued.length - 1];
      facts.push(`Last value: ${pmu(lastP.v, lastP.s, ser.uom)} at ${utc(lastP.x)}.`);
    }
    const loadView = h('button', { type: 'button', class: 'btn btn-small', id: 'fig-load-view', text: 'Load this view' });
    loadView.addEventListener('click', () => {
      from = Math.floor(axis.view[0] / pms) * pms;
      to = Math.ceil(axis.view[1] / pms) * pms;
      fromIn.value = toLocalInput(from);
      toIn.value = toLocalInput(to);
      load();
    });
    out.append(h('p', { class: 'small', id: 'fig-facts' }, facts.join(' ')), h('p', { class: 'no-print' }, loadView,
      h('span', { class: 'small muted', text: ' Zoom with the mouse wheel, the + and − buttons or keys (chart focused); pan by dragging, ◀ ▶ or the arrow keys; 0 resets.' })));
  }

  nameSel.addEventListener('change', () => { q.subject = undefined; clear(subjSel); load(); });
  subjSel.addEventListener('change', draw);
  form.addEventListener('submit', (e) => {
    e.preventDefault();
    const a = fromLocalInput(fromIn.value);
    const b = fromLocalInput(toIn.value);
    clear(status);
    if (Number.isNaN(a) || Number.isNaN(b) || !(a < b)) { status.append(message('error', 'Give a From time before the To time.')); return; }
    from = a; to = b;
    load();
  });
  csvBtn.addEventListener('click', async () => {
    clear(status);
    if (!nameSel.value) return;
    csvBtn.disabled = true;
    try {
      const text = await api(`${P}/figures${qs({ from: iso(from), to: iso(to), name: nameSel.value, subject: subjSel.value, format: 'csv' })}`,
        { accept: 'text', acceptType: 'text/csv' });
      download(`${plant}-${nameSel.value}-${subjSel.value.replace(/[^A-Za-z0-9._-]+/g, '_')}-${iso(from).slice(0, 13)}.csv`, text);
      status.append(message('ok', 'CSV downloaded.'));
    } catch (err) {
      if (err.status !== 401) status.append(errorBox(err, 'CSV download'));
    } finally { csvBtn.disabled = false; }
  });

  await load();
}
