// The results screen: the season's first results drawn as inline SVG —
// cover over time by treatment, survival curves, leaf damage by treatment,
// effect sizes with their intervals and the predator split — each beside
// what it assumes. The numbers come from the `results` operation; every
// number for every day is in the exported analysis tables.

import { call } from './api.js';
import { h, clear } from './dom.js';
import { app, register, setWhere } from './shell.js';
import { lineChart, intervalPlot, marker, s, styleOf } from './chart.js';

let missingAs = 'dead';

const RESPONSE_NAMES = {
  'cover.total': 'Total cover (%)',
  'damage.index': 'Herbivory index',
  'damage.mean_pct': 'Mean leaf damage (%)',
  'diversity.richness': 'Species richness',
  'diversity.shannon': 'Shannon H′',
};

export function responseName(r) {
  if (RESPONSE_NAMES[r]) return RESPONSE_NAMES[r];
  if (r.startsWith('cover.group.')) return `Cover of ${r.slice('cover.group.'.length)} (%)`;
  if (r.startsWith('survival.')) return `Survival of ${r.slice('survival.'.length)}`;
  return r;
}

const CONTRASTS = {
  herbivores_vs_plants_only: 'herbivores vs plants only',
  lethal_vs_no_predator: 'lethal predator vs no predator',
  risk_vs_no_predator: 'risk-only predator vs no predator',
};

const num = (x, d = 3) => (x === null || x === undefined ? 'NA' : x.toFixed(d));
const interval = (lo, hi) => (lo === null || hi === null ? 'NA' : `${num(lo)} to ${num(hi)}`);

function assumes(text) {
  return h('details', { class: 'assumes' }, h('summary', {}, 'What this assumes'), h('p', {}, text));
}

function legend(treatments, styles) {
  return h(
    'ul',
    { class: 'legend', 'aria-label': 'Treatments' },
    treatments.map((t) => {
      const st = styles.get(t.code);
      return h(
        'li',
        { dataset: { treatment: t.code } },
        s('svg', { viewBox: '0 0 16 16', width: 16, height: 16, 'aria-hidden': 'true' }, marker(st.marker, 8, 8, st.colour, 5)),
        h('strong', {}, t.code),
        ` ${t.name}`,
      );
    }),
  );
}

/** Panels of one chart per response (cover, damage), treatments as lines. */
function seriesPanels(list, styles, yLabel) {
  const byResponse = new Map();
  for (const se of list) byResponse.set(se.response, [...(byResponse.get(se.response) ?? []), se]);
  return h(
    'div',
    { class: 'panels' },
    [...byResponse.entries()].map(([response, series]) =>
      h(
        'figure',
        { class: 'panel' },
        h('figcaption', {}, responseName(response)),
        lineChart({
          name: response,
          title: `${responseName(response)} by treatment over the season, means with 95 % intervals`,
          xLabel: 'Day of the experiment',
          yLabel: yLabel(response),
          series: series.map((se) => ({
            key: se.treatment,
            label: `${se.treatment} (n = ${se.points.map((p) => p.n).join('/')})`,
            ...pick(styles, se.treatment),
            points: se.points.map((p) => ({ x: p.day, y: p.mean, lo: p.ci_low, hi: p.ci_high, note: `${p.n} cages` })),
          })),
        }),
      ),
    ),
  );
}

function pick(styles, code) {
  const st = styles.get(code) ?? styleOf(99);
  return { colour: st.colour, marker: st.marker };
}

function survivalPanels(curves, styles) {
  const byTaxon = new Map();
  for (const c of curves) byTaxon.set(c.taxon, [...(byTaxon.get(c.taxon) ?? []), c]);
  if (!byTaxon.size) return h('p', {}, 'No stocked animals were followed.');
  return h(
    'div',
    { class: 'panels' },
    [...byTaxon.entries()].map(([taxon, list]) =>
      h(
        'figure',
        { class: 'panel' },
        h('figcaption', {}, `Survival of ${taxon}`),
        lineChart({
          name: `survival.${taxon}`,
          title: `Kaplan–Meier survival of ${taxon} by treatment, with 95 % intervals`,
          xLabel: 'Day of the experiment',
          yLabel: 'Proportion surviving',
          step: true,
          yFixed: [0, 1],
          series: list.map((c) => ({
            key: c.treatment,
            label: c.treatment,
            ...pick(styles, c.treatment),
            points: c.points.map((p) => ({ x: p.day, y: p.survival, lo: p.ci_low, hi: p.ci_high })),
          })),
        }),
      ),
    ),
  );
}

function pickContrast(i) {
  const st = styleOf(i);
  return { colour: st.colour, marker: st.marker };
}

function effects(points) {
  if (!points.length) return h('p', {}, 'No contrast has data yet.');
  const order = Object.keys(CONTRASTS);
  const rows = [...points]
    .sort((a, b) => a.response.localeCompare(b.response) || order.indexOf(a.contrast) - order.indexOf(b.contrast))
    .map((e) => ({
      group: `${responseName(e.response)}, day ${e.day}`,
      label: `${e.label}: ${CONTRASTS[e.contrast] ?? e.contrast}`,
      est: e.lrr,
      lo: e.ci_low,
      hi: e.ci_high,
      ...pickContrast(order.indexOf(e.contrast)),
      note: e.note,
      dataset: { response: e.response, contrast: e.contrast },
    }));
  return intervalPlot({
    name: 'effects',
    title: 'Log response ratios of each contrast with 95 % intervals; 0 = no effect',
    rows,
    xLabel: 'Log response ratio, ln(treatment mean / control mean)',
  });
}

function splitTable(rows) {
  if (!rows.length) return h('p', {}, 'The split needs treatments with herbivores and no, lethal and risk-only predators.');
  return h(
    'div',
    { class: 'table-wrap' },
    h(
      'table',
      { class: 'split' },
      h('thead', {}, h('tr', {}, ['Response', 'Day', 'Total', 'Non-consumptive', 'Consumptive', 'Share non-consumptive (95 % interval)', 'Note'].map((c) => h('th', { scope: 'col' }, c)))),
      h(
        'tbody',
        {},
        rows.map((p) =>
          h(
            'tr',
            { dataset: { response: p.response } },
            h('th', { scope: 'row' }, responseName(p.response)),
            h('td', {}, p.day),
            h('td', {}, num(p.total)),
            h('td', {}, num(p.nonconsumptive)),
            h('td', {}, num(p.consumptive)),
            h('td', {}, `${num(p.share)} (${interval(p.share_ci_low, p.share_ci_high)})`),
            h('td', {}, p.note ?? ''),
          ),
        ),
      ),
    ),
  );
}

export async function showResults(main) {
  setWhere(app.overview?.site, 'Results');
  clear(main, h('p', { class: 'progress' }, 'Analysing the season…'));
  const r = await call('results', { missing_as: missingAs });
  const styles = new Map(r.treatments.map((t, i) => [t.code, styleOf(i)]));
  const c = r.charts;
  clear(
    main,
    h('button', { class: 'back', onclick: () => (location.hash = '#/route') }, '← Route'),
    h('h1', {}, 'First results'),
    r.title ? h('p', { class: 'facts' }, r.title) : null,
    h(
      'p',
      { class: 'hint' },
      'From the data as recorded now, before the analyst’s own checks: the day’s-end flags are not applied, and a value a check flags is analysed as recorded. Every number for every day is in the exported analysis tables and report.md.',
    ),
    h(
      'label',
      { class: 'observer' },
      'Animals not found alive count as ',
      h(
        'select',
        {
          id: 'missing-as',
          onchange: (e) => {
            missingAs = e.target.value;
            showResults(main);
          },
        },
        h('option', { value: 'dead', selected: missingAs === 'dead' }, 'deaths'),
        h('option', { value: 'censored', selected: missingAs === 'censored' }, 'censored (only animals found dead are deaths)'),
      ),
    ),
    legend(r.treatments, styles),
    h('section', { class: 'card results', id: 'results-cover' }, h('h2', {}, 'Cover over time'), seriesPanels(c.cover_over_time, styles, () => 'Mean cover (%)'), assumes(r.assumptions.summaries)),
    h('section', { class: 'card results', id: 'results-survival' }, h('h2', {}, 'Survival of stocked animals'), survivalPanels(c.survival_curves, styles), assumes(r.assumptions.survival)),
    h('section', { class: 'card results', id: 'results-damage' }, h('h2', {}, 'Leaf damage by treatment'), seriesPanels(c.damage_by_treatment, styles, (resp) => responseName(resp)), assumes(r.assumptions.summaries)),
    h('section', { class: 'card results', id: 'results-effects' }, h('h2', {}, 'Effect sizes'), effects(c.effect_sizes), assumes(r.assumptions.effects)),
    h('section', { class: 'card results', id: 'results-split' }, h('h2', {}, 'Consumptive and non-consumptive predator effects'), splitTable(c.predator_split), assumes(r.assumptions.split)),
    r.notes.length ? h('section', { class: 'card results', id: 'results-notes' }, h('h2', {}, 'How the data were handled'), h('ul', {}, r.notes.map((n) => h('li', {}, n)))) : null,
  );
}

register('results', showResults);
