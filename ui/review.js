// Day's-end review: run the checks, then fix each flag by editing the record
// or confirm it with a note. Confirmations travel with the data.

import { call } from './api.js';
import { h, clear } from './dom.js';
import { app, register, save, setWhere } from './shell.js';

const SEVERITY = { error: 'Error', warning: 'Warning', notice: 'Notice' };
const STATUS = { open: 'Open', fixed: 'Fixed ✓', confirmed: 'Confirmed ✓' };
let wholeSeason = false;

function flagCard(flag, cageIds, rerun) {
  const note = h('textarea', { rows: 2, 'aria-label': `Note for this flag at ${flag.cage}`, placeholder: 'Why the data are right as recorded' });
  const open = flag.status === 'open';
  return h(
    'li',
    { class: `flag sev-${flag.severity} status-${flag.status}`, dataset: { rule: flag.rule_id, cage: flag.cage, id: flag.id } },
    // The rule's id is for the analyst (in the export and the API), not the crew's screen.
    h('div', { class: 'flag-head' }, h('span', { class: 'sev' }, SEVERITY[flag.severity]), h('span', {}, `Day ${flag.day} · ${flag.date}`), h('span', { class: 'status' }, STATUS[flag.status])),
    h('p', { class: 'message' }, flag.message),
    h('p', { class: 'fix' }, `Fix: ${flag.fix}`),
    flag.note ? h('p', { class: 'note' }, `Note: ${flag.note}`) : null,
    open
      ? h(
          'div',
          { class: 'row' },
          cageIds[flag.cage] ? h('a', { class: 'button', href: `?date=${flag.date}#/cage/${cageIds[flag.cage]}` }, 'Open the record') : null,
          note,
          h('button', {
            class: 'confirm',
            onclick: async () => {
              try {
                await save('confirm_flag', { flag_id: flag.id, note: note.value }, { label: `flag at ${flag.cage} confirmed` });
                await rerun();
              } catch {
                /* the toast says why */
              }
            },
          }, 'Confirm with note'),
        )
      : null,
  );
}

export async function showReview(main) {
  const rerun = () => showReview(main);
  const [report, route] = await Promise.all([
    call('review', { date: app.date || undefined, season: wholeSeason }),
    call('route', { date: app.date || undefined }),
  ]);
  const cageIds = Object.fromEntries(route.blocks.flatMap((b) => b.cages.map((c) => [c.label, c.enclosure_id])));
  setWhere(app.overview?.site, `Checks: ${report.scope}`);
  const resolved = report.flags.length - report.open;
  const byCage = new Map();
  for (const f of report.flags) byCage.set(f.cage, [...(byCage.get(f.cage) ?? []), f]);
  clear(
    main,
    h('button', { class: 'back', onclick: () => (location.hash = '#/route') }, '← Route'),
    h('h1', {}, "Day's-end checks"),
    h(
      'label',
      { class: 'toggle' },
      h('input', { type: 'checkbox', checked: wholeSeason, onchange: (e) => { wholeSeason = e.target.checked; rerun(); } }),
      ' Whole season (not just this day)',
    ),
    h('p', { class: 'progress', id: 'review-progress' }, report.flags.length ? `${resolved} of ${report.flags.length} resolved · ${report.open} open (${report.open_errors} errors)` : `Nothing to fix for ${report.scope}.`),
    [...byCage.entries()].map(([cage, flags]) => h('section', { class: 'card flags', dataset: { cage } }, h('h2', {}, `Cage ${cage}`), h('ol', {}, flags.map((f) => flagCard(f, cageIds, rerun))))),
  );
}

register('review', showReview);
