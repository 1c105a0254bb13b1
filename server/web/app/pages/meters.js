// Meters: the service's ranking, worst first.
import { api, seg } from '../api.js';
import { h, message, utc, pmu, stateBadge } from '../dom.js';

export async function render(ctx, view) {
  const plant = ctx.route.plant;
  const list = await api(`/plants/${seg(plant)}/meters`);
  const meters = list.meters || [];
  view.append(h('h1', null, 'Meters ', h('span', { class: 'muted mono', text: plant })),
    h('p', { class: 'lede', text: 'Worst first, as the service ranks them. Bias is the pooled estimate over the periods of the current evidence, in the meter\'s own unit (positive: it reads high). A suspect meter is a candidate for inspection, not proof of a fault.' }));
  if (list.method) view.append(h('p', { class: 'small muted', text: `Method: ${list.method}.` }));
  if (!meters.length) { view.append(message('info', 'This plant has no meters in its model.')); return; }
  const rows = meters.map((m) => h('tr', { 'data-meter-row': m.tag, 'data-state': m.status },
    h('td', null, stateBadge(m.status)),
    h('th', { scope: 'row' }, h('a', { class: 'mono', href: `#/plant/${encodeURIComponent(plant)}/meters/${encodeURIComponent(m.tag)}`, text: m.tag })),
    h('td', { class: 'mono', text: m.stream }),
    h('td', { text: `${m.quantity}${m.component ? ` ${m.component}` : ''}` }),
    h('td', { class: 'n', text: m.bias === null || m.bias === undefined ? '–' : pmu(m.bias, m.bias_sigma, m.uom) }),
    h('td', { text: m.evidence_since ? utc(m.evidence_since) : '–' }),
    h('td', { class: 'reason', text: m.reason || '' })));
  view.append(h('div', { class: 'table-wrap' }, h('table', { id: 'meter-table' },
    h('caption', { class: 'visually-hidden', text: 'Meters ranked by health, worst first' }),
    h('thead', null, h('tr', null, ['State', 'Tag', 'Stream', 'Quantity', 'Bias ± σ', 'Evidence since', 'Reason'].map((t) => h('th', { scope: 'col', class: t === 'Bias ± σ' ? 'n' : null, text: t })))),
    h('tbody', null, rows))));
}
