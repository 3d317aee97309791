// Today's route: the cages due on the field day, block by block, with where
// each one stands, and who observes (kept on this device).

import { call } from './api.js';
import { h, clear, fmt } from './dom.js';
import { app, goToDay, register, setWhere } from './shell.js';
import { safetyCard } from './safety.js';

const STATE_TEXT = {
  not_started: 'To do',
  partial: 'Started',
  done: 'Done ✓',
  overdue: 'Missed visit',
  nothing_due: 'Nothing due',
};

/** Which cages the route lists: 'due' (work today or flags), 'left' (still to do today), 'all'. */
let showing = 'due';

/** A cage with work left today. */
const workLeft = (c) => ['not_started', 'partial', 'overdue'].includes(c.state) || (c.late ?? []).length > 0;

function shiftDay(date, days) {
  const d = new Date(`${date}T12:00:00Z`);
  d.setUTCDate(d.getUTCDate() + days);
  return d.toISOString().slice(0, 10);
}

function cageButton(cage) {
  const due = cage.due.map((k) => fmt.kind[k]).join(' + ');
  const planned = (list) => list.map((p) => `${fmt.kind[p.kind]} day ${p.day}`).join(', ');
  const missed = planned(cage.overdue);
  // Planned on an earlier day, still within its grace days: to do today.
  const late = planned(cage.late ?? []);
  return h(
    'a',
    { class: `cage state-${cage.state}`, href: `#/cage/${cage.enclosure_id}`, dataset: { label: cage.label } },
    h('span', { class: 'cage-label' }, cage.label),
    h('span', { class: 'cage-treatment' }, `${cage.treatment_code} · ${cage.treatment_name}`),
    due ? h('span', { class: 'cage-due' }, due) : null,
    late ? h('span', { class: 'cage-due' }, `Still to do: ${late}`) : null,
    missed ? h('span', { class: 'cage-late' }, `Missed: ${missed}`) : null,
    h('span', { class: 'cage-state' }, STATE_TEXT[cage.state]),
    // The stored flags still open, of the whole season (as the checks' season view lists them).
    cage.open_flags ? h('span', { class: 'cage-flags' }, `⚑ ${cage.open_flags} open in the season`) : null,
  );
}

/** Who observes: remembered on this device and sent with each visit. */
function observerField() {
  const input = h('input', {
    id: 'observer',
    value: app.observer,
    autocomplete: 'name',
    placeholder: 'Your name or initials',
    onchange: (e) => {
      app.observer = e.target.value.trim();
      localStorage.setItem('fieldcage-observer', app.observer);
    },
  });
  return h('label', { class: 'observer' }, 'Observer ', input);
}

export async function showRoute(main, shownAs) {
  const route = await call('route', { date: app.date || undefined });
  if (shownAs !== undefined && shownAs !== app.view) return;
  const o = app.overview;
  setWhere(o.site, `Day ${route.day} (${route.date})`);
  const blocks = route.blocks
    .map((b) => ({
      ...b,
      cages: b.cages.filter((c) => showing === 'all' || (showing === 'left' ? workLeft(c) : c.state !== 'nothing_due' || c.open_flags > 0)),
    }))
    .filter((b) => b.cages.length > 0);
  const total = route.blocks.flatMap((b) => b.cages).filter((c) => c.state !== 'nothing_due');
  const done = total.filter((c) => c.state === 'done').length;
  clear(
    main,
    h(
      'section',
      { class: 'route-head' },
      h('h1', {}, o.experiment_title),
      h(
        'div',
        { class: 'day-nav' },
        h('button', { onclick: () => goToDay(shiftDay(route.date, -1)), 'aria-label': 'Previous day' }, '◀'),
        h('strong', { class: 'day' }, `Day ${route.day} · ${route.date}`),
        h('button', { onclick: () => goToDay(shiftDay(route.date, 1)), 'aria-label': 'Next day' }, '▶'),
      ),
      h('p', { class: 'progress' }, total.length ? `${done} of ${total.length} cages done today` : 'No visits due on this day.'),
      observerField(),
      h('div', { class: 'row' }, h('a', { class: 'button', href: '#/review' }, "Day's-end checks"), h('a', { class: 'button', href: '#/results' }, 'Results')),
      h(
        'div',
        { class: 'row filter', role: 'group', 'aria-label': 'Which cages' },
        [['due', 'Due today'], ['left', 'Still due today'], ['all', 'Every cage']].map(([value, text]) =>
          h('button', { class: showing === value ? 'small chosen' : 'small', 'aria-pressed': showing === value ? 'true' : 'false', dataset: { filter: value }, onclick: () => { showing = value; dispatchEvent(new HashChangeEvent('hashchange')); } }, text)),
      ),
    ),
    showing === 'left' && !blocks.length ? h('p', { class: 'progress' }, 'Every cage due today is done.') : null,
    blocks.map((b) => h('section', { class: 'block' }, h('h2', {}, `Block ${b.code}`), h('div', { class: 'cages' }, b.cages.map(cageButton)))),
    safetyCard(),
  );
}

register('route', showRoute);
