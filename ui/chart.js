// Inline-SVG charts for the results screen: lines over days with interval
// whiskers (or survival steps with an interval band), and an interval plot of
// effect sizes. Plain DOM, no library; colour is never the only cue (each
// treatment also has its own marker and a label in the legend).

const NS = 'http://www.w3.org/2000/svg';

/** Make an SVG element. */
export function s(tag, attrs = {}, ...children) {
  const el = document.createElementNS(NS, tag);
  for (const [key, value] of Object.entries(attrs)) {
    if (value === undefined || value === null || value === false) continue;
    el.setAttribute(key, String(value));
  }
  for (const child of children.flat(Infinity)) {
    if (child === undefined || child === null || child === false) continue;
    el.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return el;
}

/** Colours and markers by treatment position (our own set, distinct in greyscale too). */
const COLOURS = ['#2d5f86', '#b4561f', '#2f7a4a', '#85407f', '#5b5b55', '#a4861a'];
const MARKERS = ['circle', 'square', 'triangle', 'diamond', 'cross', 'bar'];

export function styleOf(index) {
  return { colour: COLOURS[index % COLOURS.length], marker: MARKERS[index % MARKERS.length] };
}

/** A marker of a treatment at (x, y). */
export function marker(kind, x, y, colour, r = 4.5) {
  const common = { fill: colour, stroke: '#fff', 'stroke-width': 1 };
  switch (kind) {
    case 'square':
      return s('rect', { ...common, x: x - r, y: y - r, width: 2 * r, height: 2 * r });
    case 'triangle':
      return s('path', { ...common, d: `M${x},${y - r * 1.2}L${x + r * 1.1},${y + r * 0.8}L${x - r * 1.1},${y + r * 0.8}Z` });
    case 'diamond':
      return s('path', { ...common, d: `M${x},${y - r * 1.3}L${x + r * 1.1},${y}L${x},${y + r * 1.3}L${x - r * 1.1},${y}Z` });
    case 'cross':
      return s('path', { fill: 'none', stroke: colour, 'stroke-width': 2.5, d: `M${x - r},${y - r}L${x + r},${y + r}M${x - r},${y + r}L${x + r},${y - r}` });
    case 'bar':
      return s('rect', { ...common, x: x - r * 1.3, y: y - r * 0.6, width: 2.6 * r, height: 1.2 * r });
    default:
      return s('circle', { ...common, cx: x, cy: y, r });
  }
}

/** Round tick values covering [lo, hi]. */
export function ticks(lo, hi, count = 5) {
  if (!(hi > lo)) return [lo];
  const raw = (hi - lo) / count;
  const mag = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 2.5, 5, 10].map((m) => m * mag).find((m) => m >= raw) ?? 10 * mag;
  const out = [];
  for (let v = Math.ceil(lo / step - 1e-9) * step; v <= hi + step * 1e-9; v += step) out.push(Number(v.toFixed(10)));
  return out;
}

const num = (x, d = 2) => (x === null || x === undefined || Number.isNaN(x) ? 'NA' : (Math.round(x * 10 ** d) / 10 ** d).toString());

/** The extent of some values, padded; `fixed` values are always inside. */
function extent(values, fixed = []) {
  const v = values.concat(fixed).filter((x) => x !== null && x !== undefined && Number.isFinite(x));
  if (!v.length) return [0, 1];
  let lo = Math.min(...v);
  let hi = Math.max(...v);
  if (lo === hi) {
    lo -= 1;
    hi += 1;
  }
  const pad = (hi - lo) * 0.05;
  return [lo - (fixed.includes(lo) ? 0 : pad), hi + (fixed.includes(hi) ? 0 : pad)];
}

const W = 460;
const H = 260;
const M = { left: 52, right: 14, top: 14, bottom: 40 };

function axes(g, xs, ys, xScale, yScale, xLabel, yLabel) {
  const x0 = M.left;
  const x1 = W - M.right;
  const y0 = H - M.bottom;
  for (const t of ys) {
    const y = yScale(t);
    g.append(s('line', { x1: x0, x2: x1, y1: y, y2: y, stroke: '#d8d6cc', 'stroke-width': 1 }));
    g.append(s('text', { x: x0 - 6, y: y + 4, 'text-anchor': 'end', class: 'tick' }, num(t, 3)));
  }
  for (const t of xs) {
    const x = xScale(t);
    g.append(s('line', { x1: x, x2: x, y1: y0, y2: y0 + 5, stroke: '#555' }));
    g.append(s('text', { x, y: y0 + 18, 'text-anchor': 'middle', class: 'tick' }, num(t, 3)));
  }
  g.append(s('line', { x1: x0, x2: x1, y1: y0, y2: y0, stroke: '#555' }));
  g.append(s('line', { x1: x0, x2: x0, y1: M.top, y2: y0, stroke: '#555' }));
  g.append(s('text', { x: (x0 + x1) / 2, y: H - 6, 'text-anchor': 'middle', class: 'axis-label' }, xLabel));
  g.append(s('text', { x: 12, y: (M.top + y0) / 2, 'text-anchor': 'middle', class: 'axis-label', transform: `rotate(-90 12 ${(M.top + y0) / 2})` }, yLabel));
}

/**
 * Lines over days, one per series, with a whisker for each point's interval;
 * `step: true` draws survival steps with the interval as a band.
 * series: [{ key, label, colour, marker, points: [{ x, y, lo, hi, note }] }]
 */
export function lineChart({ name, title, series, xLabel, yLabel, step = false, yFixed = [] }) {
  const all = series.flatMap((se) => se.points);
  const [xmin, xmax] = extent(all.map((p) => p.x));
  const [ymin, ymax] = extent(all.flatMap((p) => [p.y, p.lo, p.hi]), yFixed);
  const xScale = (x) => M.left + ((x - xmin) / (xmax - xmin)) * (W - M.left - M.right);
  const yScale = (y) => H - M.bottom - ((y - ymin) / (ymax - ymin)) * (H - M.top - M.bottom);
  const svg = s('svg', { viewBox: `0 0 ${W} ${H}`, class: 'chart', role: 'img', 'aria-label': title, 'data-chart': name });
  svg.append(s('title', {}, title));
  axes(svg, ticks(xmin, xmax, 6).filter((t) => Number.isInteger(t)), ticks(ymin, ymax), xScale, yScale, xLabel, yLabel);
  series.forEach((se, i) => {
    const g = s('g', { class: 'series', 'data-key': se.key });
    const offset = step ? 0 : (i - (series.length - 1) / 2) * 3; // keep whiskers apart
    const pts = se.points.map((p) => ({ ...p, px: xScale(p.x) + offset, py: yScale(p.y) }));
    if (step) {
      const band = [];
      pts.forEach((p, k) => {
        const next = pts[k + 1]?.px ?? p.px + 6;
        if (p.lo !== null && p.hi !== null && p.lo !== undefined && p.hi !== undefined) band.push([p.px, next, yScale(p.lo), yScale(p.hi)]);
      });
      for (const [a, b, lo, hi] of band) g.append(s('rect', { x: a, y: hi, width: Math.max(b - a, 0.5), height: Math.max(lo - hi, 0), fill: se.colour, 'fill-opacity': 0.12 }));
      const d = pts.map((p, k) => (k === 0 ? `M${p.px},${p.py}` : `H${p.px}V${p.py}`)).join('');
      g.append(s('path', { d, fill: 'none', stroke: se.colour, 'stroke-width': 2.5, class: 'line' }));
    } else {
      g.append(s('path', { d: pts.map((p, k) => `${k ? 'L' : 'M'}${p.px},${p.py}`).join(''), fill: 'none', stroke: se.colour, 'stroke-width': 2.5, class: 'line' }));
      for (const p of pts) {
        if (p.lo !== null && p.hi !== null && p.lo !== undefined && p.hi !== undefined) {
          g.append(s('path', { d: `M${p.px},${yScale(p.lo)}V${yScale(p.hi)}M${p.px - 4},${yScale(p.lo)}h8M${p.px - 4},${yScale(p.hi)}h8`, stroke: se.colour, 'stroke-width': 1.5, fill: 'none', class: 'whisker' }));
        }
      }
    }
    for (const p of pts) {
      const m = marker(se.marker, p.px, p.py, se.colour);
      m.setAttribute('class', 'point');
      m.append(s('title', {}, `${se.label}, day ${p.x}: ${num(p.y, 3)}${p.lo !== null && p.lo !== undefined ? ` (95 % interval ${num(p.lo, 3)} to ${num(p.hi, 3)})` : ' (no interval)'}${p.note ? `; ${p.note}` : ''}`));
      g.append(m);
    }
    svg.append(g);
  });
  return svg;
}

/**
 * Effect sizes with their intervals, one row each, a line at 0 (no effect).
 * rows: [{ group, label, est, lo, hi, note, dataset }]
 */
export function intervalPlot({ name, title, rows, xLabel }) {
  const rowH = 22;
  const left = 250;
  const right = 16;
  const width = 680;
  let y = 12;
  const placed = [];
  let group = null;
  for (const r of rows) {
    if (r.group !== group) {
      group = r.group;
      y += rowH * 1.5;
      placed.push({ heading: group, y });
    }
    y += rowH;
    placed.push({ row: r, y });
  }
  const height = y + 48;
  const [lo, hi] = extent(rows.flatMap((r) => [r.est, r.lo, r.hi]), [0]);
  const x = (v) => left + ((v - lo) / (hi - lo)) * (width - left - right);
  const svg = s('svg', { viewBox: `0 0 ${width} ${height}`, class: 'chart wide', role: 'img', 'aria-label': title, 'data-chart': name });
  svg.append(s('title', {}, title));
  for (const t of ticks(lo, hi, 6)) {
    if (t !== 0) svg.append(s('line', { x1: x(t), x2: x(t), y1: 8, y2: height - 36, stroke: '#e2e0d6', 'stroke-width': 1 }));
    svg.append(s('text', { x: x(t), y: height - 22, 'text-anchor': 'middle', class: 'tick' }, num(t, 3)));
  }
  // No effect: the log ratio 0 (equal means).
  svg.append(s('line', { x1: x(0), x2: x(0), y1: 8, y2: height - 36, stroke: '#333', 'stroke-width': 1.5, class: 'zero' }));
  svg.append(s('text', { x: (left + width - right) / 2, y: height - 4, 'text-anchor': 'middle', class: 'axis-label' }, xLabel));
  for (const p of placed) {
    if (p.heading) {
      svg.append(s('text', { x: 4, y: p.y, class: 'group-label' }, p.heading));
      continue;
    }
    const r = p.row;
    const g = s('g', { class: 'effect', ...Object.fromEntries(Object.entries(r.dataset ?? {}).map(([k, v]) => [`data-${k}`, v])) });
    g.append(s('text', { x: 14, y: p.y + 4, class: 'row-label' }, r.label));
    if (r.lo !== null && r.hi !== null) g.append(s('line', { x1: x(r.lo), x2: x(r.hi), y1: p.y, y2: p.y, stroke: r.colour ?? '#333', 'stroke-width': 2, class: 'whisker' }));
    const m = marker(r.marker ?? 'diamond', x(r.est), p.y, r.colour ?? '#333', 5);
    m.setAttribute('class', 'point');
    m.append(s('title', {}, `${r.group}, ${r.label}: ${num(r.est, 3)}${r.lo !== null ? ` (95 % interval ${num(r.lo, 3)} to ${num(r.hi, 3)})` : ''}${r.note ? `; ${r.note}` : ''}`));
    g.append(m);
    if (r.note) g.append(s('text', { x: width - right, y: p.y + 4, 'text-anchor': 'end', class: 'row-note' }, '⚠'));
    svg.append(g);
  }
  return svg;
}
