// Today's route: the cages due on the field day, block by block, with where
// each one stands, and who observes (kept on this device).

import { call } from './api.js';
import { h, clear, fmt } from './dom.js';
import { app, register, setWhere } from './shell.js';

const STATE_TEXT = {
  not_started: 'To do',
  partial: 'Started',
  done: 'Done ✓',
  overdue: 'Missed visit',
  nothing_due: 'Nothing due',
};

let showAll = false;

function shiftDay(date, days) {
  const d = new Date(`${date}T12:00:00Z`);
  d.setUTCDate(d.getUTCDate() + days);
  return d.toISOString().slice(0, 10);
}

function goToDay(date) {
  app.date = date;
  app.overview = null;
  const url = new URL(location.href);
  url.searchParams.set('date', date);
  history.replaceState(null, '', url);
  dispatchEvent(new HashChangeEvent('hashchange'));
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
    cage.open_flags ? h('span', { class: 'cage-flags' }, `⚑ ${cage.open_flags} open flag${cage.open_flags === 1 ? '' : 's'}`) : null,
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

function safetyCard() {
  return h(
    'details',
    { class: 'safety' },
    h('summary', {}, 'Before you go out: safety and permits'),
    h(
      'ul',
      {},
      h('li', {}, 'Heat and sun: work in cooler hours, carry water, rest in shade. Keep the tablet out of direct sun.'),
      h('li', {}, 'Ticks: long clothing; check yourself after every field day.'),
      h('li', {}, 'Stakes and mesh are sharp: wear gloves, cap stakes, watch your step.'),
      h('li', {}, 'Handle animals as your animal-care rules require; wash hands afterwards.'),
      h('li', {}, 'Collecting, holding and releasing animals may need permits. Never release stocked animals outside the study area unless your permit allows it.'),
      h('li', {}, 'Tell someone where you are. Local regulations and your institution’s rules come first.'),
    ),
  );
}

export async function showRoute(main) {
  const route = await call('route', { date: app.date || undefined });
  const o = app.overview;
  setWhere(o.site, `Day ${route.day} (${route.date})`);
  const blocks = route.blocks
    .map((b) => ({ ...b, cages: b.cages.filter((c) => showAll || c.state !== 'nothing_due' || c.open_flags > 0) }))
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
        'label',
        { class: 'toggle' },
        h('input', { type: 'checkbox', checked: showAll, onchange: (e) => { showAll = e.target.checked; dispatchEvent(new HashChangeEvent('hashchange')); } }),
        ' Show every cage',
      ),
    ),
    blocks.map((b) => h('section', { class: 'block' }, h('h2', {}, `Block ${b.code}`), h('div', { class: 'cages' }, b.cages.map(cageButton)))),
    safetyCard(),
  );
}

register('route', showRoute);
