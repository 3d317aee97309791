// The history of one record: every change made to it, oldest first, with the
// value before and after (reached from "History" beside a saved entry).

import { call } from './api.js';
import { h, clear } from './dom.js';
import { app, register, setWhere } from './shell.js';

export async function showHistory(main, table, id) {
  setWhere(app.overview?.site, 'History');
  const changes = await call('history', { table, id });
  clear(
    main,
    h('button', { class: 'back', onclick: () => history.back() }, '← Back'),
    h('h2', {}, `History of this ${table.replace('_', ' ')}`),
    h(
      'ol',
      { class: 'history' },
      changes.map((c) =>
        h(
          'li',
          {},
          h('span', { class: 'when' }, c.at.replace('T', ' ').replace('Z', ' UTC')),
          ' ',
          h('strong', {}, c.op === 'delete' ? 'deleted' : c.field),
          c.op === 'delete' ? '' : ` ${c.old === null ? '(empty)' : c.old} → ${c.new === null ? '(empty)' : c.new}`,
        ),
      ),
    ),
  );
}

register('history', showHistory, 2);
