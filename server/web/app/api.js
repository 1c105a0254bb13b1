// The API client. The token lives in this tab's sessionStorage only and goes in the
// Authorization header; never in a URL.

const KEY = 'loopbal.token';

export function getToken() {
  try { return sessionStorage.getItem(KEY); } catch { return null; }
}

export function setToken(t) {
  sessionStorage.setItem(KEY, t);
}

export function clearToken() {
  try { sessionStorage.removeItem(KEY); } catch { /* storage unavailable */ }
}

export class ApiError extends Error {
  constructor(status, title, detail, body) {
    super(detail || title || `HTTP ${status}`);
    this.status = status;
    this.title = title;
    this.detail = detail;
    this.body = body;
  }
}

let onUnauthorized = () => {};
export function setUnauthorizedHandler(fn) { onUnauthorized = fn; }

/** Path segment, encoded. */
export function seg(x) { return encodeURIComponent(x); }

/** Query string from an object (skips null/undefined). */
export function qs(params) {
  const u = new URLSearchParams();
  for (const [k, v] of Object.entries(params || {})) {
    if (v !== null && v !== undefined && v !== '') u.set(k, String(v));
  }
  const t = u.toString();
  return t ? `?${t}` : '';
}

/**
 * Call the API. opts: {method, body (object → JSON), accept ('json' | 'text' | 'blob'),
 * signal}. Throws ApiError with the problem's detail.
 */
export async function api(path, opts = {}) {
  const headers = {};
  const token = getToken();
  if (token) headers.Authorization = `Bearer ${token}`;
  let body;
  if (opts.body !== undefined) {
    headers['Content-Type'] = 'application/json';
    body = JSON.stringify(opts.body);
  }
  const accept = opts.accept || 'json';
  headers.Accept = accept === 'json' ? 'application/json, application/problem+json' : (opts.acceptType || '*/*');
  let res;
  try {
    res = await fetch(`/api/v1${path}`, {
      method: opts.method || 'GET', headers, body, signal: opts.signal,
      credentials: 'omit', cache: 'no-store', referrerPolicy: 'no-referrer',
    });
  } catch (e) {
    if (e.name === 'AbortError') throw e;
    throw new ApiError(0, 'Network error', `The service did not answer (${e.message}).`);
  }
  if (res.status === 401 && !opts.noAuthRedirect) {
    onUnauthorized('The service did not accept the token (401): sign in again.');
    throw new ApiError(401, 'Unauthorized', 'The service did not accept the token.');
  }
  if (!res.ok) {
    let title = res.statusText;
    let detail = '';
    let parsed = null;
    const text = await res.text();
    try {
      parsed = JSON.parse(text);
      title = parsed.title || title;
      detail = parsed.detail || '';
    } catch { detail = text.slice(0, 500); }
    throw new ApiError(res.status, title, `${res.status} ${title}${detail ? `: ${detail}` : ''}`, parsed);
  }
  if (accept === 'blob') return res.blob();
  if (accept === 'text') return res.text();
  if (res.status === 204) return null;
  return res.json();
}

// A small cache for things that change rarely within a session (model, flowsheet).
const cache = new Map();
export async function cached(path, ttlMs = 60000) {
  const hit = cache.get(path);
  if (hit && Date.now() - hit.at < ttlMs) return hit.value;
  const value = await api(path);
  cache.set(path, { at: Date.now(), value });
  return value;
}
export function clearCache() { cache.clear(); }
