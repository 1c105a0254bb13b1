// Shared look-ups for the plant pages.
import { api, cached, seg, qs } from '../api.js';
import { h, HOUR, parseTime } from '../dom.js';

export async function plantsList() {
  return cached('/plants', 30000);
}

export async function plantInfo(plant) {
  const list = await plantsList();
  return (list.plants || []).find((p) => p.name === plant) || null;
}

export function periodMs(info) {
  return ((info && info.period_seconds) || 3600) * 1000;
}

/** The start (ms) of the plant's last reconciled period, or of the last period with any run. */
export async function latestStart(plant) {
  const info = await plantInfo(plant).catch(() => null);
  if (info && info.last_period && info.last_period.start) return parseTime(info.last_period.start);
  const now = Date.now();
  const list = await api(`/plants/${seg(plant)}/periods${qs({ from: new Date(now - 60 * 24 * HOUR).toISOString(), to: new Date(now).toISOString() })}`);
  // A `failed` period (its last run abandoned at the time limit) has a run only if an earlier one was kept.
  const runs = (list.periods || []).filter((p) => p.status && !['no_readings', 'pending', 'no_run'].includes(p.status)
    && !(p.status === 'failed' && p.run_id == null));
  if (!runs.length) return null;
  return parseTime(runs[runs.length - 1].start ?? runs[runs.length - 1].period_start);
}

export async function model(plant) {
  return cached(`/plants/${seg(plant)}/model`, 60000);
}

/** The model body of GET .../model, whatever the wrapping. */
export function modelBody(doc) {
  if (!doc) return {};
  return doc.model || doc.spec || doc;
}

export function listOf(m, key) {
  return m[key] || m[`${key}s`] || [];
}

export function pageHead(title, lede) {
  return [h('h1', { text: title }), lede ? h('p', { class: 'lede', text: lede }) : null];
}
