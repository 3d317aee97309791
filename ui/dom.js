// A tiny element builder: h('button', {class: 'big', onclick}, 'Save').

export function h(tag, attrs = {}, ...children) {
  const el = document.createElement(tag);
  for (const [key, value] of Object.entries(attrs ?? {})) {
    if (value === undefined || value === null || value === false) continue;
    if (key.startsWith('on')) el.addEventListener(key.slice(2), value);
    else if (key === 'class') el.className = value;
    else if (key === 'dataset') Object.assign(el.dataset, value);
    else if (value === true) el.setAttribute(key, '');
    else el.setAttribute(key, String(value));
  }
  for (const child of children.flat(Infinity)) {
    if (child === undefined || child === null || child === false) continue;
    el.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return el;
}

export function clear(el, ...children) {
  el.replaceChildren(...children.flat(Infinity).filter((c) => c !== null && c !== undefined && c !== false));
  return el;
}

export const fmt = {
  pct(x) {
    if (x === null || x === undefined) return '—';
    return `${Math.round(x * 10) / 10} %`;
  },
  range(c) {
    if (c.lower_pct === null || c.upper_pct === null) return c.description ?? '';
    if (c.lower_pct === c.upper_pct) return `${c.lower_pct} %`;
    return `${c.lower_pct}–${c.upper_pct} %`;
  },
  kind: { stocking: 'Stocking', census: 'Census', cover: 'Cover', damage: 'Damage' },
};
