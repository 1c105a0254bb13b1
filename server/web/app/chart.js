// SVG charts drawn from scratch: time series with σ bands, zoom and pan on a shared time
// axis, marks for failed global tests and notes; and a plain x–y chart for sweeps.
import { h, s, clear, num, uid } from './dom.js';

const W = 960;
const M = { l: 78, r: 18, t: 16, b: 40 };

// ---- a shared time axis -----------------------------------------------------------------

export function makeAxis(t0, t1) {
  const listeners = new Set();
  const ax = {
    full: [t0, t1],
    view: [t0, t1],
    on(fn) { listeners.add(fn); return () => listeners.delete(fn); },
    set(a, b) {
      const [f0, f1] = ax.full;
      const minSpan = Math.max(3600 * 1000 * 2, (f1 - f0) / 2000);
      let span = Math.max(minSpan, Math.min(b - a, f1 - f0));
      let lo = a;
      if (b - a < minSpan) lo = (a + b) / 2 - span / 2;
      lo = Math.max(f0, Math.min(lo, f1 - span));
      ax.view = [lo, lo + span];
      for (const fn of listeners) fn(ax.view);
    },
    zoom(factor, centre = 0.5) {
      const [a, b] = ax.view;
      const c = a + (b - a) * centre;
      const span = (b - a) / factor;
      ax.set(c - span * centre, c - span * centre + span);
    },
    pan(frac) {
      const [a, b] = ax.view;
      const d = (b - a) * frac;
      ax.set(a + d, b + d);
    },
    reset() { ax.set(ax.full[0], ax.full[1]); },
    zoomed() { return ax.view[0] > ax.full[0] || ax.view[1] < ax.full[1]; },
  };
  return ax;
}

// ---- ticks ------------------------------------------------------------------------------

export function niceTicks(lo, hi, n = 5) {
  if (!(hi > lo)) { const d = Math.abs(lo) || 1; lo -= d * 0.05; hi += d * 0.05; }
  const raw = (hi - lo) / n;
  const p = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 2.5, 5, 10].map((m) => m * p).find((x) => x >= raw) || raw;
  const out = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push(Math.abs(v) < step * 1e-9 ? 0 : v);
  return { ticks: out, step };
}

const HOURS = [1, 2, 3, 6, 12, 24, 48, 72, 168, 336, 720].map((x) => x * 3600 * 1000);

function pad(n) { return String(n).padStart(2, '0'); }

function timeTicks(a, b, n = 7) {
  const step = HOURS.find((x) => (b - a) / x <= n) || HOURS[HOURS.length - 1];
  const out = [];
  for (let t = Math.ceil(a / step) * step; t <= b; t += step) out.push(t);
  const fmt = (t) => {
    const d = new Date(t);
    const day = `${pad(d.getUTCMonth() + 1)}-${pad(d.getUTCDate())}`;
    return step >= 24 * 3600 * 1000 ? `${d.getUTCFullYear()}-${day}` : `${day} ${pad(d.getUTCHours())}:00`;
  };
  return { ticks: out, fmt };
}

// ---- drawing helpers ----------------------------------------------------------------------

function pathFor(pts, x, y) {
  // pts: [{x, v}] with v possibly null → a path with gaps.
  let d = '';
  let pen = false;
  for (const p of pts) {
    if (p.v === null || p.v === undefined || !Number.isFinite(p.v)) { pen = false; continue; }
    d += `${pen ? 'L' : 'M'}${x(p.x).toFixed(1)},${y(p.v).toFixed(1)}`;
    pen = true;
  }
  return d;
}

function bandPaths(pts, x, y) {
  // One closed polygon per run of points that have both value and σ.
  const runs = [];
  let cur = [];
  for (const p of pts) {
    if (p.v === null || p.v === undefined || !(p.s >= 0) || !Number.isFinite(p.v)) {
      if (cur.length) runs.push(cur);
      cur = [];
    } else cur.push(p);
  }
  if (cur.length) runs.push(cur);
  return runs.map((run) => {
    if (run.length === 1) {
      const p = run[0];
      const px = x(p.x);
      return `M${(px - 2).toFixed(1)},${y(p.v + p.s).toFixed(1)}H${(px + 2).toFixed(1)}V${y(p.v - p.s).toFixed(1)}H${(px - 2).toFixed(1)}Z`;
    }
    const up = run.map((p) => `${x(p.x).toFixed(1)},${y(p.v + p.s).toFixed(1)}`);
    const lo = run.slice().reverse().map((p) => `${x(p.x).toFixed(1)},${y(p.v - p.s).toFixed(1)}`);
    return `M${up.join('L')}L${lo.join('L')}Z`;
  });
}

/**
 * A chart. opts:
 *  title, yLabel (with its unit), height,
 *  xKind: 'time' (with opts.axis, a shared axis) | 'num' (with opts.xDomain [a, b], xLabel),
 *  series: [{label, cls, band: bool, points: [{x, v, s}]}],
 *  hlines: [{y, label, cls}], vlines: [{x, label, cls, data}],
 *  failed: [x...] with opts.failedWidth (ms), notes: [{x, label}],
 *  id (for the svg), controls (zoom/pan buttons; time only)
 * returns {el, redraw}
 */
export function chart(opts) {
  const H = opts.height || 240;
  const svgId = opts.id || uid('chart');
  const clipId = uid('clip');
  const hatchId = uid('hatch');
  const svg = s('svg', {
    id: svgId, class: 'chart', viewBox: `0 0 ${W} ${H}`, role: 'group', tabindex: '0',
    'aria-label': `${opts.title}. ${opts.xKind === 'time' ? 'Focus and use + and − to zoom, arrow keys to pan, 0 to reset.' : ''}`,
    preserveAspectRatio: 'xMidYMid meet',
  });
  const readout = h('p', { class: 'chart-readout', text: ' ' });
  const legend = h('ul', { class: 'legend' });
  const fig = h('figure', { class: 'chart-fig' });
  const caption = h('figcaption', { class: 'chart-title', text: opts.title });
  fig.append(caption);
  if (opts.xKind === 'time' && opts.controls !== false) fig.append(controls(opts.axis, opts.title));
  fig.append(svg, legend, readout);

  for (const ser of opts.series) {
    legend.append(h('li', null,
      h('span', { class: `key key-line ${ser.cls || ''}${ser.band ? '' : ' key-noband'}`, 'aria-hidden': 'true' }),
      ser.label + (ser.band ? ' (line: value; shaded band: ± 1σ)' : '')));
  }
  for (const hl of opts.hlines || []) {
    if (hl.legend === false) continue;
    legend.append(h('li', null, h('span', { class: `key key-dash ${hl.cls || ''}`, 'aria-hidden': 'true' }), hl.label));
  }
  if (opts.failed && opts.failed.length) {
    legend.append(h('li', null, h('span', { class: 'key key-failed', 'aria-hidden': 'true' }),
      `hatched column with ✕: ${opts.failedLabel || 'global test failed that period'} (${opts.failed.length})`));
  }
  if (opts.notes && opts.notes.length) {
    legend.append(h('li', null, h('span', { class: 'key key-note', 'aria-hidden': 'true' }), 'vertical line with ✎: a technician\'s note'));
  }
  for (const vl of opts.vlines || []) {
    legend.append(h('li', null, h('span', { class: `key key-dash ${vl.cls || ''}`, 'aria-hidden': 'true' }), vl.label));
  }

  function xDomain() {
    return opts.xKind === 'time' ? opts.axis.view : opts.xDomain;
  }

  function redraw() {
    clear(svg);
    const [x0, x1] = xDomain();
    const pw = W - M.l - M.r;
    const ph = H - M.t - M.b;
    const x = (v) => M.l + ((v - x0) / (x1 - x0 || 1)) * pw;
    // y domain over the visible points
    let lo = Infinity;
    let hi = -Infinity;
    for (const ser of opts.series) {
      for (const p of ser.points) {
        if (p.v === null || p.v === undefined || !Number.isFinite(p.v)) continue;
        if (p.x < x0 - (x1 - x0) * 0.02 || p.x > x1 + (x1 - x0) * 0.02) continue;
        const e = ser.band && p.s > 0 ? p.s : 0;
        lo = Math.min(lo, p.v - e);
        hi = Math.max(hi, p.v + e);
      }
    }
    for (const hl of opts.hlines || []) { lo = Math.min(lo, hl.y); hi = Math.max(hi, hl.y); }
    if (!Number.isFinite(lo)) { lo = 0; hi = 1; }
    const padY = (hi - lo) * 0.06 || Math.abs(hi) * 0.05 || 1;
    const yt = niceTicks(lo - padY, hi + padY, 5);
    const y0 = Math.min(yt.ticks[0], lo - padY);
    const y1 = Math.max(yt.ticks[yt.ticks.length - 1], hi + padY);
    const y = (v) => M.t + ph - ((v - y0) / (y1 - y0 || 1)) * ph;

    const defs = s('defs', null,
      s('clipPath', { id: clipId }, s('rect', { x: M.l, y: M.t, width: pw, height: ph })),
      s('pattern', { id: hatchId, width: 6, height: 6, patternUnits: 'userSpaceOnUse', patternTransform: 'rotate(45)' },
        s('rect', { width: 6, height: 6, class: 'hatch-bg' }),
        s('line', { x1: 0, y1: 0, x2: 0, y2: 6, class: 'hatch-line' })));
    svg.append(defs);
    svg.append(s('rect', { x: M.l, y: M.t, width: pw, height: ph, class: 'plot-bg' }));

    // grid and y ticks
    const gy = s('g', { class: 'axis axis-y' });
    for (const t of yt.ticks) {
      if (t < y0 || t > y1) continue;
      gy.append(s('line', { x1: M.l, x2: M.l + pw, y1: y(t), y2: y(t), class: 'grid' }));
      gy.append(s('text', { x: M.l - 6, y: y(t) + 4, 'text-anchor': 'end', text: num(t, 3) }));
    }
    gy.append(s('text', { x: 14, y: M.t + ph / 2, transform: `rotate(-90 14 ${M.t + ph / 2})`, 'text-anchor': 'middle', class: 'axis-title', text: opts.yLabel || '' }));
    svg.append(gy);

    // x ticks
    const gx = s('g', { class: 'axis axis-x' });
    let xt;
    if (opts.xKind === 'time') xt = timeTicks(x0, x1);
    else { const n = niceTicks(x0, x1, 8); xt = { ticks: n.ticks, fmt: (v) => num(v, 3) }; }
    for (const t of xt.ticks) {
      if (t < x0 || t > x1) continue;
      gx.append(s('line', { x1: x(t), x2: x(t), y1: M.t, y2: M.t + ph, class: 'grid grid-x' }));
      const edge = x(t) > W - M.r - 40 ? 'end' : x(t) < M.l + 30 ? 'start' : 'middle';
      gx.append(s('text', { x: x(t), y: H - M.b + 16, 'text-anchor': edge, text: xt.fmt(t) }));
    }
    gx.append(s('text', { x: M.l + pw, y: H - 4, 'text-anchor': 'end', class: 'axis-title', text: opts.xKind === 'time' ? 'time, UTC (+00:00)' : (opts.xLabel || '') }));
    svg.append(gx);

    const plot = s('g', { 'clip-path': `url(#${clipId})` });
    svg.append(plot);

    // failed periods: hatched columns with a ✕ at the top
    for (const t of opts.failed || []) {
      if (t + (opts.failedWidth || 0) < x0 || t > x1) continue;
      const xa = x(t);
      const w = Math.max(2, x(t + (opts.failedWidth || 0)) - xa);
      const g = s('g', { 'data-failed': new Date(t).toISOString(), class: 'failed' },
        s('rect', { x: xa, y: M.t, width: w, height: ph, fill: `url(#${hatchId})`, class: 'failed-col' }),
        s('text', { x: xa + w / 2, y: M.t + 11, 'text-anchor': 'middle', class: 'failed-x', text: '✕' }),
        s('title', { text: `${opts.failedLabel || 'global test failed'}: period from ${new Date(t).toISOString()}` }));
      plot.append(g);
    }

    for (const hl of opts.hlines || []) {
      plot.append(s('line', { x1: M.l, x2: M.l + pw, y1: y(hl.y), y2: y(hl.y), class: `hline ${hl.cls || ''}` }));
      if (hl.tag) plot.append(s('text', { x: M.l + pw - 4, y: y(hl.y) - 4, 'text-anchor': 'end', class: 'hline-label', text: hl.tag }));
    }

    for (const ser of opts.series) {
      const g = s('g', { class: `series ${ser.cls || ''}`, 'data-series': ser.label });
      if (ser.band) {
        for (const d of bandPaths(ser.points, x, y)) g.append(s('path', { d, class: 'band', 'data-band': '' }));
      }
      const d = pathFor(ser.points, x, y);
      if (d) g.append(s('path', { d, class: 'line' }));
      // isolated points (between gaps) as dots so they stay visible
      ser.points.forEach((p, i) => {
        const prev = ser.points[i - 1];
        const next = ser.points[i + 1];
        const ok = (q) => q && q.v !== null && q.v !== undefined && Number.isFinite(q.v);
        if (ok(p) && !ok(prev) && !ok(next) && p.x >= x0 && p.x <= x1) g.append(s('circle', { cx: x(p.x), cy: y(p.v), r: 2.5, class: 'dot' }));
      });
      if (ser.markers) {
        for (const p of ser.points) {
          if (p.v === null || !Number.isFinite(p.v)) continue;
          g.append(s('circle', { cx: x(p.x), cy: y(p.v), r: 3.5, class: 'marker' }));
        }
      }
      plot.append(g);
    }

    for (const vl of opts.vlines || []) {
      if (vl.x < x0 || vl.x > x1) continue;
      const g = s('g', { class: `vline ${vl.cls || ''}` });
      if (vl.data) for (const [k, v] of Object.entries(vl.data)) g.setAttribute(`data-${k}`, v);
      g.append(s('line', { x1: x(vl.x), x2: x(vl.x), y1: M.t, y2: M.t + ph }));
      g.append(s('text', { x: x(vl.x) + 4, y: M.t + 12, class: 'vline-label', text: vl.tag || vl.label }));
      plot.append(g);
    }

    for (const n of opts.notes || []) {
      if (n.x < x0 || n.x > x1) continue;
      plot.append(s('g', { class: 'note-mark', 'data-note-mark': n.id === undefined ? '' : String(n.id) },
        s('line', { x1: x(n.x), x2: x(n.x), y1: M.t, y2: M.t + ph }),
        s('text', { x: x(n.x) + 3, y: M.t + ph - 6, text: `✎ ${n.label}` }),
        s('title', { text: n.title || n.label })));
    }

    svg.append(s('rect', { x: M.l, y: M.t, width: pw, height: ph, class: 'plot-frame' }));
    svg._scale = { x, x0, x1, pw };
  }

  // hover readout: nearest point of each series
  svg.addEventListener('pointermove', (e) => {
    if (!svg._scale || dragging) return;
    const r = svg.getBoundingClientRect();
    const vx = ((e.clientX - r.left) / r.width) * W;
    const { x0, x1, pw } = svg._scale;
    const xv = x0 + ((vx - M.l) / pw) * (x1 - x0);
    if (vx < M.l || vx > W - M.r) return;
    const parts = [];
    let at = null;
    for (const ser of opts.series) {
      let best = null;
      for (const p of ser.points) if (!best || Math.abs(p.x - xv) < Math.abs(best.x - xv)) best = p;
      if (best) parts.push(`${ser.label}: ${ser.fmt ? ser.fmt(best) : num(best.v)}`);
      if (best && at === null) at = best.x;
    }
    if (at === null) return;
    const where = opts.xKind === 'time' ? new Date(at).toISOString().replace('.000Z', 'Z').replace('T', ' ').replace('Z', ' UTC') : `${opts.xLabel || 'x'} ${num(at, 4)}`;
    readout.textContent = `${where} — ${parts.join('; ')}`;
  });

  // zoom and pan (time charts)
  let dragging = null;
  if (opts.xKind === 'time') {
    const ax = opts.axis;
    svg.addEventListener('wheel', (e) => {
      e.preventDefault();
      const r = svg.getBoundingClientRect();
      const vx = ((e.clientX - r.left) / r.width) * W;
      const c = Math.min(1, Math.max(0, (vx - M.l) / (W - M.l - M.r)));
      ax.zoom(e.deltaY < 0 ? 1.25 : 0.8, c);
    }, { passive: false });
    svg.addEventListener('pointerdown', (e) => {
      if (e.button !== 0) return;
      dragging = { x: e.clientX, view: ax.view.slice() };
      svg.setPointerCapture(e.pointerId);
      svg.classList.add('dragging');
    });
    svg.addEventListener('pointermove', (e) => {
      if (!dragging) return;
      const r = svg.getBoundingClientRect();
      const frac = (e.clientX - dragging.x) / (r.width * (W - M.l - M.r) / W);
      const span = dragging.view[1] - dragging.view[0];
      ax.set(dragging.view[0] - frac * span, dragging.view[1] - frac * span);
    });
    const end = () => { dragging = null; svg.classList.remove('dragging'); };
    svg.addEventListener('pointerup', end);
    svg.addEventListener('pointercancel', end);
    svg.addEventListener('keydown', (e) => {
      const k = e.key;
      if (k === '+' || k === '=') ax.zoom(1.5);
      else if (k === '-' || k === '_') ax.zoom(1 / 1.5);
      else if (k === 'ArrowLeft') ax.pan(-0.2);
      else if (k === 'ArrowRight') ax.pan(0.2);
      else if (k === '0' || k === 'Home') ax.reset();
      else return;
      e.preventDefault();
    });
    const off = ax.on(() => { if (svg.isConnected || !fig.dataset.attached) redraw(); });
    fig._off = off;
  }
  redraw();
  return { el: fig, svg, redraw };
}

function controls(ax, title) {
  const b = (text, label, fn) => h('button', { type: 'button', class: 'btn btn-small', 'aria-label': `${label} (${title})`, title: label, text, onclick: fn });
  return h('div', { class: 'chart-controls', role: 'toolbar', 'aria-label': `Zoom and pan: ${title}` },
    b('−', 'Zoom out', () => ax.zoom(1 / 1.5)),
    b('+', 'Zoom in', () => ax.zoom(1.5)),
    b('◀', 'Pan earlier', () => ax.pan(-0.25)),
    b('▶', 'Pan later', () => ax.pan(0.25)),
    b('Reset', 'Show the whole range', () => ax.reset()));
}
