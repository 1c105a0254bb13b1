// Plants: each plant the token may read, its last period, its global test, its meters.
import { h, message, utc, num, stateBadge, STATES } from '../dom.js';
import { plantsList } from './common.js';
import { plantHref, PLANT_TABS } from '../main.js';

export function globalTest(gt) {
  if (!gt) return h('span', { class: 'unknown-test', text: 'not tested' });
  return h('span', null,
    h('span', { class: gt.passed ? 'pass' : 'fail', text: gt.passed ? 'passed' : 'failed' }),
    ` — statistic ${num(gt.statistic, 4)} vs critical ${num(gt.critical, 4)} (dof ${gt.dof}${gt.p_value !== undefined && gt.p_value !== null ? `, p = ${num(gt.p_value, 3)}` : ''})`);
}

export async function render(ctx, view) {
  const list = await plantsList();
  view.append(h('h1', { text: 'Plants' }),
    h('p', { class: 'lede', text: 'Every plant this token may read, with its last reconciled hour and its meters by health state.' }));
  const plants = list.plants || [];
  if (!plants.length) {
    view.append(message('info', 'No plant is visible to this token yet: an administrator stores a plant model first (PUT /api/v1/plants/NAME/model).'));
    return;
  }
  const ul = h('ul', { class: 'plant-list' });
  for (const p of plants) {
    const counts = h('span', { class: 'counts' });
    const entries = Object.entries(p.meters || {}).filter(([, n]) => n > 0)
      .sort((a, b) => (STATES[a[0]]?.rank ?? 99) - (STATES[b[0]]?.rank ?? 99));
    for (const [state, n] of entries) counts.append(h('span', null, stateBadge(state), ` ${n}`));
    if (!entries.length) counts.append('no meters yet');
    const last = p.last_period;
    ul.append(h('li', { class: 'plant-card card', 'data-plant': p.name },
      h('h2', null, h('a', { href: plantHref(p.name, 'loop'), text: p.name })),
      h('dl', null,
        h('dt', { text: 'Model' }), h('dd', { text: p.model_name ? `${p.model_name}, revision ${p.revision ?? '–'}` : 'no model stored' }),
        h('dt', { text: 'Period' }), h('dd', { text: p.period_seconds ? `${num(p.period_seconds / 60, 3)} min` : '–' }),
        h('dt', { text: 'Last period' }), h('dd', { text: last ? `${utc(last.start)} — ${last.status}` : 'none reconciled yet' }),
        h('dt', { text: 'Global test' }), h('dd', null, last ? globalTest(last.global_test) : '–'),
        h('dt', { text: 'Meters' }), h('dd', null, counts)),
      h('div', { class: 'links' }, PLANT_TABS.map(([page, label]) => h('a', { href: plantHref(p.name, page), text: label })))));
  }
  view.append(ul);
}
