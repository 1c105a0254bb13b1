// DOM building and number/time formatting. Every string goes in as text: no HTML parsing.

const SVG_NS = 'http://www.w3.org/2000/svg';

function apply(el, attrs, isSvg) {
  if (!attrs) return;
  for (const [k, v] of Object.entries(attrs)) {
    if (v === undefined || v === null || v === false) continue;
    if (k === 'text') el.textContent = String(v);
    else if (k === 'class') {
      if (isSvg) el.setAttribute('class', v); else el.className = v;
    } else if (k === 'dataset') Object.assign(el.dataset, v);
    else if (k.startsWith('on') && typeof v === 'function') el.addEventListener(k.slice(2), v);
    else if (k === 'for') el.htmlFor = v;
    else if (k === 'value' && !isSvg) el.value = v;
    else if (k === 'checked' || k === 'selected' || k === 'disabled' || k === 'hidden') {
      el[k] = Boolean(v);
    } else if (k === 'style') {
      throw new Error('inline style attributes are not used (CSP)');
    } else el.setAttribute(k, v === true ? '' : String(v));
  }
}

function append(el, children) {
  for (const c of children.flat(Infinity)) {
    if (c === null || c === undefined || c === false) continue;
    el.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
}

/** h('div', {class: 'x'}, child, 'text', ...) */
export function h(tag, attrs, ...children) {
  const el = document.createElement(tag);
  apply(el, attrs, false);
  append(el, children);
  return el;
}

/** s('path', {d: ...}) in the SVG namespace */
export function s(tag, attrs, ...children) {
  const el = document.createElementNS(SVG_NS, tag);
  apply(el, attrs, true);
  append(el, children);
  return el;
}

export function clear(el) {
  while (el.firstChild) el.removeChild(el.firstChild);
  return el;
}

let idSeq = 0;
export function uid(prefix = 'id') {
  idSeq += 1;
  return `${prefix}-${idSeq}`;
}

/** A labelled field: returns {wrap, input}. */
export function field(label, input, hint) {
  if (!input.id) input.id = uid('f');
  const wrap = h('div', { class: 'field' },
    h('label', { for: input.id, text: label }), input,
    hint ? h('span', { class: 'hint', text: hint }) : null);
  if (hint) {
    const hid = uid('hint');
    wrap.lastChild.id = hid;
    input.setAttribute('aria-describedby', hid);
  }
  return { wrap, input };
}

export function select(options, value, attrs) {
  const el = h('select', attrs);
  for (const o of options) {
    const opt = typeof o === 'object' ? o : { value: o, label: o };
    el.append(h('option', { value: opt.value, text: opt.label, selected: opt.value === value }));
  }
  return el;
}

// ---- numbers --------------------------------------------------------------------------

function decimalsFor(sigma) {
  if (!(sigma > 0) || !Number.isFinite(sigma)) return null;
  const e = Math.floor(Math.log10(sigma));
  return Math.max(0, 1 - e);
}

/** A number with about four significant figures (no σ known). */
export function num(v, sig = 4) {
  if (v === null || v === undefined || !Number.isFinite(v)) return '–';
  if (v === 0) return '0';
  const a = Math.abs(v);
  if (a >= 1e6 || a < 1e-4) return v.toExponential(sig - 1);
  const d = Math.max(0, sig - 1 - Math.floor(Math.log10(a)));
  const text = v.toFixed(Math.min(d, 10));
  return text.includes('.') ? text.replace(/\.?0+$/, '') : text;
}

/** "1234 ± 5.6" (σ to two significant figures, value to the same place). */
export function pm(v, sigma) {
  if (v === null || v === undefined || !Number.isFinite(v)) return '–';
  const d = decimalsFor(sigma);
  if (d === null) return num(v);
  if (d > 10) return `${v.toExponential(3)} ± ${sigma.toExponential(1)}`;
  return `${v.toFixed(d)} ± ${sigma.toFixed(d)}`;
}

/** With a unit: "1234 ± 5.6 kmol/h". */
export function pmu(v, sigma, unit) {
  if (v === null || v === undefined || !Number.isFinite(v)) return `– ${unit || ''}`.trim();
  const text = sigma === null || sigma === undefined ? num(v) : pm(v, sigma);
  return unit ? `${text} ${unit}` : text;
}

export function nu(v, unit) {
  return unit ? `${num(v)} ${unit}` : num(v);
}

// ---- times (always UTC) ---------------------------------------------------------------

function pad(n) { return String(n).padStart(2, '0'); }

export function parseTime(t) {
  return typeof t === 'number' ? t : Date.parse(t);
}

/** "2026-09-17 23:00 UTC (+00:00)" */
export function utc(t, withOffset = true) {
  if (t === null || t === undefined) return '–';
  const d = new Date(parseTime(t));
  if (Number.isNaN(d.getTime())) return String(t);
  const text = `${d.getUTCFullYear()}-${pad(d.getUTCMonth() + 1)}-${pad(d.getUTCDate())} ${pad(d.getUTCHours())}:${pad(d.getUTCMinutes())}`;
  return withOffset ? `${text} UTC (+00:00)` : `${text} UTC`;
}

/** RFC 3339 with Z, whole seconds. */
export function iso(ms) {
  return new Date(ms).toISOString().replace(/\.\d{3}Z$/, 'Z');
}

/** A UTC time as the text of a time input: "2026-09-17 23:00". */
export function toLocalInput(ms) {
  return iso(ms).slice(0, 16).replace('T', ' ');
}

/** Parse "YYYY-MM-DD HH:MM" (or with a T, or a date alone) as UTC; NaN when malformed. */
export function fromLocalInput(v) {
  const m = /^\s*(\d{4})-(\d{2})-(\d{2})(?:[ T](\d{2}):(\d{2}))?\s*(?:Z|UTC)?\s*$/i.exec(v || '');
  if (!m) return NaN;
  const t = Date.UTC(+m[1], +m[2] - 1, +m[3], +(m[4] || 0), +(m[5] || 0));
  return Number.isNaN(t) ? NaN : t;
}

/** Attributes of a UTC time input. */
export const TIME_INPUT = { type: 'text', inputmode: 'numeric', placeholder: 'YYYY-MM-DD HH:MM', pattern: '\\d{4}-\\d{2}-\\d{2}( \\d{2}:\\d{2})?', size: '17', autocomplete: 'off' };

export const HOUR = 3600 * 1000;

// ---- meter health states: a symbol AND a word, never colour alone ------------------------

export const STATES = {
  suspect: { sym: '◆', word: 'suspect', rank: 0 },
  frozen: { sym: '■', word: 'frozen', rank: 1 },
  out_of_range: { sym: '▼', word: 'out of range', rank: 2 },
  watch: { sym: '▲', word: 'watch', rank: 3 },
  out_of_service: { sym: '⊘', word: 'out of service', rank: 4 },
  missing: { sym: '◌', word: 'missing', rank: 5 },
  untestable: { sym: '◇', word: 'untestable', rank: 6 },
  ok: { sym: '●', word: 'ok', rank: 7 },
};

export function stateInfo(state) {
  return STATES[state] || { sym: '?', word: String(state || 'unknown'), rank: 99 };
}

/** <span class="state state-suspect"><span aria-hidden>◆</span> suspect</span> */
export function stateBadge(state) {
  const info = stateInfo(state);
  const safe = STATES[state] ? state : 'unknown';
  return h('span', { class: `state state-${safe}`, dataset: { state: String(state) } },
    h('span', { class: 'state-sym', 'aria-hidden': 'true', text: info.sym }),
    ' ', info.word);
}

/** A plain message box: kind is 'error' (role=alert), 'info' or 'ok'. */
export function message(kind, text) {
  const el = h('p', { class: `msg msg-${kind}`, text });
  if (kind === 'error') el.setAttribute('role', 'alert');
  else el.setAttribute('role', 'status');
  return el;
}

export function loading(text = 'Loading…') {
  return h('p', { class: 'loading', role: 'status', text });
}

/** Table from headers and rows of cells (strings or Nodes). */
export function table(headers, rows, attrs) {
  const t = h('table', attrs);
  const head = h('tr', null, headers.map((x) => h('th', { scope: 'col' }, x)));
  t.append(h('thead', null, head));
  const body = h('tbody');
  for (const r of rows) body.append(r instanceof Node ? r : h('tr', null, r.map((c) => h('td', null, c))));
  t.append(body);
  return t;
}

/** Download text as a file through a Blob URL. */
export function download(name, text, type = 'text/csv') {
  const blob = text instanceof Blob ? text : new Blob([text], { type });
  const url = URL.createObjectURL(blob);
  const a = h('a', { href: url, download: name, class: 'visually-hidden', text: name });
  document.body.append(a);
  a.click();
  setTimeout(() => { URL.revokeObjectURL(url); a.remove(); }, 1000);
}

/** A CSV cell: text neutralised against formula injection (OWASP), quoted when needed. */
export function csvCell(v, isText) {
  if (v === null || v === undefined) return '';
  let t = String(v);
  if (isText && /^[=+\-@\t\r\n]/.test(t)) t = `'${t}`;
  if (/[",\r\n]/.test(t)) t = `"${t.replace(/"/g, '""')}"`;
  return t;
}

export function csv(header, rows, textCols) {
  const lines = [header.map((x) => csvCell(x, true)).join(',')];
  for (const r of rows) lines.push(r.map((c, i) => csvCell(c, textCols.includes(i))).join(','));
  return `${lines.join('\r\n')}\r\n`;
}

/** The page's ready flag for browser tests: "0" while loading, "1" when done. */
export function ready(v) { document.body.dataset.ready = v ? '1' : '0'; }

/** A visible error for a failed call (role=alert), with the problem's detail. */
export function errorBox(err, what) {
  const text = err && err.message ? err.message : String(err);
  return message('error', what ? `${what}: ${text}` : text);
}
