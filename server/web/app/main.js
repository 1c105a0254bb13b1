// The workspace shell: sign-in, header, hash routing, page lifecycle.
import { h, clear, message, loading } from './dom.js';
import { api, getToken, setToken, clearToken, setUnauthorizedHandler, clearCache, ApiError } from './api.js';

// Record CSP violations where the browser tests can read them.
const violations = [];
window.addEventListener('securitypolicyviolation', (e) => {
  violations.push(`${e.violatedDirective} ${e.blockedURI || ''} ${e.sourceFile || ''}:${e.lineNumber || ''}`);
  const el = document.getElementById('csp-violations');
  if (el) {
    el.dataset.count = String(violations.length);
    el.textContent = violations.join('\n');
  }
});

const PAGES = {
  plants: () => import('./pages/plants.js'),
  loop: () => import('./pages/loop.js'),
  balances: () => import('./pages/balances.js'),
  figures: () => import('./pages/figures.js'),
  meters: () => import('./pages/meters.js'),
  meter: () => import('./pages/meter.js'),
  'what-if': () => import('./pages/whatif.js'),
  report: () => import('./pages/report.js'),
};

export const PLANT_TABS = [
  ['loop', 'Loop'], ['balances', 'Balances'], ['figures', 'Figures'],
  ['meters', 'Meters'], ['what-if', 'Purge what-if'], ['report', 'Monthly report'],
];

let me = null; // {role, plant, may}
let signInMessage = null;
let generation = 0;

function setReady(v) { document.body.dataset.ready = v ? '1' : '0'; }

/** Parse "#/plant/NAME/meters/TAG?x=1" */
export function parseHash(hash = location.hash) {
  const raw = hash.replace(/^#/, '') || '/plants';
  const [pathPart, query = ''] = raw.split('?');
  const parts = pathPart.split('/').filter(Boolean).map((p) => {
    try { return decodeURIComponent(p); } catch { return p; }
  });
  const q = Object.fromEntries(new URLSearchParams(query));
  if (parts[0] === 'plant' && parts[1]) {
    const page = parts[2] || 'loop';
    if (page === 'meters' && parts[3]) return { page: 'meter', plant: parts[1], tag: parts[3], q };
    return { page, plant: parts[1], q };
  }
  if (parts[0] === 'sign-in') return { page: 'sign-in', q };
  return { page: 'plants', q };
}

export function plantHref(plant, page, query) {
  const qsx = query ? `?${new URLSearchParams(query).toString()}` : '';
  return `#/plant/${encodeURIComponent(plant)}/${page}${qsx}`;
}

/** Replace the hash's query without a new history entry and without re-rendering. */
let quietHash = null;
export function setQuery(route, query) {
  const base = route.page === 'meter'
    ? `#/plant/${encodeURIComponent(route.plant)}/meters/${encodeURIComponent(route.tag)}`
    : plantHref(route.plant, route.page);
  const clean = Object.fromEntries(Object.entries(query).filter(([, v]) => v !== null && v !== undefined && v !== ''));
  const next = Object.keys(clean).length ? `${base.split('?')[0]}?${new URLSearchParams(clean)}` : base;
  if (next !== location.hash) {
    quietHash = next;
    history.replaceState(null, '', next);
  }
}

function renderHeader(route) {
  const who = document.getElementById('who');
  const nav = clear(document.getElementById('plant-nav'));
  if (!me) { who.hidden = true; return; }
  who.hidden = false;
  document.getElementById('role').textContent = me.role;
  document.getElementById('scope').textContent = me.plant ? `plant ${me.plant} only` : 'all plants';
  const list = h('ul');
  list.append(h('li', null, h('a', {
    href: '#/plants', text: 'Plants',
    'aria-current': route.page === 'plants' ? 'page' : null,
  })));
  if (route.plant) {
    list.append(h('li', { class: 'nav-plant', text: route.plant }));
    for (const [page, label] of PLANT_TABS) {
      const current = route.page === page || (page === 'meters' && route.page === 'meter');
      list.append(h('li', null, h('a', {
        href: plantHref(route.plant, page), text: label,
        'aria-current': current ? 'page' : null,
      })));
    }
  }
  nav.append(list);
}

function signInPage(main) {
  clear(main);
  const input = h('input', {
    id: 'token', type: 'password', autocomplete: 'off', spellcheck: 'false',
    required: true, 'aria-describedby': 'token-hint',
  });
  const form = h('form', { class: 'sign-in card', id: 'sign-in-form', novalidate: true },
    h('h1', { text: 'Sign in' }),
    h('p', { text: 'Paste the bearer token an administrator created for you (loopbal token create). It is kept only in this browser tab and sent with each request; closing the tab or signing out forgets it.' }),
    h('div', { class: 'field' },
      h('label', { for: 'token', text: 'Token' }), input,
      h('span', { class: 'hint', id: 'token-hint', text: 'Starts with lb_. Never put it in a link or a chat message.' })),
    h('button', { type: 'submit', id: 'sign-in', class: 'btn btn-primary', text: 'Sign in' }));
  const out = h('div', { class: 'sign-in-msg' });
  if (signInMessage) out.append(message('error', signInMessage));
  form.addEventListener('submit', async (e) => {
    e.preventDefault();
    const t = input.value.trim();
    clear(out);
    if (!t) { out.append(message('error', 'Paste a token first.')); input.focus(); return; }
    setToken(t);
    setReady(false);
    out.append(loading('Checking the token…'));
    try {
      me = await api('/token', { noAuthRedirect: true });
      signInMessage = null;
      input.value = '';
      const want = sessionStorage.getItem('loopbal.after') || '#/plants';
      sessionStorage.removeItem('loopbal.after');
      location.hash = want.startsWith('#/') && !want.startsWith('#/sign-in') ? want : '#/plants';
      route();
    } catch (err) {
      clearToken();
      me = null;
      clear(out);
      out.append(message('error', err.status === 401
        ? 'The service does not know this token (401). Check that it was copied whole.'
        : `Sign-in failed: ${err.message}`));
      setReady(true);
    }
  });
  main.append(h('div', { class: 'sign-in-wrap' }, form, out));
  setReady(true);
  input.focus();
}

/** A token that may not read results (ingest, maintain): say so, and for maintain offer the way to a meter's note form. */
function noReadPage(r) {
  const view = h('div', { class: 'page page-noread' },
    h('h1', { text: 'This token cannot read results' }),
    h('p', { class: 'lede', text: `Its role is ${me.role}. Reconciled values, balances, figures and meters need a token of role read or admin.` }));
  if (me.may && me.may.maintain) {
    const plant = h('input', { id: 'go-plant', type: 'text', required: true, value: r.plant || me.plant || '', autocomplete: 'off' });
    const tag = h('input', { id: 'go-tag', type: 'text', required: true, autocomplete: 'off' });
    const form = h('form', { class: 'card toolbar', novalidate: true },
      h('div', { class: 'field' }, h('label', { for: 'go-plant', text: 'Plant' }), plant),
      h('div', { class: 'field' }, h('label', { for: 'go-tag', text: 'Meter tag' }), tag),
      h('button', { type: 'submit', class: 'btn btn-primary', id: 'go-meter', text: 'Write a note on this meter' }));
    form.addEventListener('submit', (e) => {
      e.preventDefault();
      if (plant.value.trim() && tag.value.trim()) location.hash = `#/plant/${encodeURIComponent(plant.value.trim())}/meters/${encodeURIComponent(tag.value.trim())}`;
    });
    view.append(h('p', { text: 'A maintain token writes technicians\' notes on meters. Name the plant and the meter:' }), form);
  } else if (me.may && me.may.ingest) {
    view.append(h('p', { text: 'An ingest token posts historian readings (POST /api/v1/plants/NAME/readings); it has nothing to show here.' }));
  }
  return view;
}

export function signOut(msg) {
  clearToken();
  clearCache();
  me = null;
  signInMessage = msg || null;
  if (location.hash && !location.hash.startsWith('#/sign-in')) {
    try { sessionStorage.setItem('loopbal.after', location.hash); } catch { /* ignore */ }
  }
  if (location.hash !== '#/sign-in') history.replaceState(null, '', '#/sign-in');
  route();
}

setUnauthorizedHandler((msg) => signOut(msg));

async function route() {
  generation += 1;
  const gen = generation;
  const main = document.getElementById('main');
  const r = parseHash();
  setReady(false);
  if (!getToken()) {
    me = null;
    renderHeader(r);
    if (r.page !== 'sign-in' && location.hash) {
      try { sessionStorage.setItem('loopbal.after', location.hash); } catch { /* ignore */ }
    }
    signInPage(main);
    return;
  }
  if (!me) {
    clear(main).append(loading('Checking the token…'));
    try {
      me = await api('/token');
    } catch (err) {
      if (gen !== generation) return;
      if (err.status === 401) return; // handled: back to sign-in
      clear(main).append(message('error', `Cannot reach the service: ${err.message}`));
      setReady(true);
      return;
    }
    if (gen !== generation) return;
  }
  if (r.page === 'sign-in') {
    history.replaceState(null, '', '#/plants');
    return route();
  }
  renderHeader(r);
  const loader = PAGES[r.page];
  clear(main);
  if (!loader) {
    main.append(message('error', `There is no page "${r.page}".`), h('p', null, h('a', { href: '#/plants', text: 'Back to the plants' })));
    setReady(true);
    return;
  }
  if (!(me.may && me.may.read) && r.page !== 'meter') {
    main.append(noReadPage(r));
    setReady(true);
    return;
  }
  main.append(loading());
  const ctx = {
    route: r, me, main,
    alive: () => gen === generation,
    setQuery: (q) => setQuery(r, q),
  };
  try {
    const mod = await loader();
    if (!ctx.alive()) return;
    const view = h('div', { class: `page page-${r.page}` });
    await mod.render(ctx, view);
    if (!ctx.alive()) return;
    clear(main).append(view);
  } catch (err) {
    if (!ctx.alive() || err.name === 'AbortError') return;
    if (err instanceof ApiError && err.status === 401) return;
    clear(main).append(message('error', err instanceof ApiError ? err.message : `Something went wrong: ${err.message}`));
    console.error(err);
  }
  if (ctx.alive()) setReady(true);
}

window.addEventListener('hashchange', () => {
  if (quietHash && location.hash === quietHash) { quietHash = null; return; }
  quietHash = null;
  route();
});

document.getElementById('sign-out').addEventListener('click', () => signOut(null));
// The skip link must not change the hash (the router owns it): move the focus instead.
document.getElementById('skip-link').addEventListener('click', (e) => {
  e.preventDefault();
  document.getElementById('main').focus();
});
route();
