// The cage sheet: everything recorded at one cage on the field day. Every
// entry is saved on its own as soon as it is made, naming only the field
// changed and the value it replaced (a value that moved meanwhile, in
// another tab or by a sync, is refused with both values, never overwritten).
// Input is parsed strictly: what cannot be stored as typed is refused at the
// field and the stored value is shown again. Action buttons are one-shot and
// keep their place when the sheet is redrawn, so a second tap lands on the
// same, now finished, button.

import { call } from './api.js';
import { h, clear, fmt } from './dom.js';
import { app, current, markDirty, newOpId, register, save, setWhere, toast, whileRedrawing } from './shell.js';
import { safetyCard } from './safety.js';

let sheet = null;
let root = null;
let view = 0;
/** An unscheduled cover survey asked for on this sheet (cover fields shown). */
let coverAskedFor = false;

function reload() {
  return whileRedrawing(redraw());
}

async function redraw() {
  const shown = view;
  const next = await call('sheet', { enclosure_id: sheet.enclosure_id, date: app.date || undefined });
  if (!current(shown)) return; // another screen is shown now: paint nothing
  sheet = next;
  paint();
}

/**
 * Save, then redraw from the stored state (what is shown is what is on
 * disk). A refusal is shown at the field (`where`), and the sheet is redrawn
 * with the stored value; an entry that waits for fieldcage keeps what was
 * typed on screen, marked as waiting.
 */
async function saveAndReload(op, args, meta, where) {
  let result;
  try {
    result = await save(op, args, meta);
  } catch (e) {
    await reload().catch(() => {});
    if (where) showProblem(where, e.message);
    return null;
  }
  if (result?.queued) {
    where?.classList.add('waiting');
    return result;
  }
  await reload().catch(() => {});
  return result;
}

/** A message under a field, in the crew's words; it stays until the next entry there. */
function showProblem(where, message) {
  const key = typeof where === 'string' ? where : where.dataset?.key;
  const el = key ? root.querySelector(`[data-key="${CSS.escape(key)}"]`) : where;
  const box = el?.closest('label, .cover-row, .leaf-row, .census-row, .form') ?? el?.parentElement;
  if (!box) {
    toast(message, null, true);
    return;
  }
  box.querySelector(':scope > .field-problem')?.remove();
  box.append(h('p', { class: 'field-problem', role: 'alert' }, message));
}

/** Parse a count as typed: '' = not assessed (null); a whole number ≥ 0; else a message. */
export function parseCount(text, label) {
  const t = text.trim();
  if (t === '') return { value: null };
  if (/^\d+$/.test(t)) return { value: Number(t) };
  if (/^-\s*\d+$/.test(t)) return { error: `${label}: ${t} is below 0; a count is 0 or more` };
  if (/^\d*[.,]\d+$/.test(t)) return { error: `${label}: ${t} is not a whole number` };
  return { error: `${label}: “${t}” is not a number` };
}

/** Parse a percent as typed: '' = not assessed; 0–100 with a point or a comma; else a message. */
export function parsePercent(text, label) {
  const t = text.trim();
  if (t === '') return { value: null };
  if (!/^\d+([.,]\d+)?$/.test(t)) {
    if (/^-/.test(t)) return { error: `${label}: ${t} is below 0 %` };
    return { error: `${label}: “${t}” is not a number` };
  }
  const x = Number(t.replace(',', '.'));
  if (x > 100) return { error: `${label}: ${t} is above 100 %` };
  return { value: x };
}

/**
 * A text field for a number: typed into → not saved yet (the header says
 * so); finished (Tab, Enter, leaving) → parsed strictly, then saved, or
 * refused at the field with the stored value shown again.
 */
function numberField({ key, stored, label, parse, onCommit, decimal = false, attrs = {} }) {
  const shown = stored === null || stored === undefined ? '' : String(stored);
  let done = false;
  const input = h('input', {
    type: 'text',
    inputmode: decimal ? 'decimal' : 'numeric',
    autocomplete: 'off',
    class: 'number',
    value: shown,
    dataset: { key },
    ...attrs,
  });
  const commit = () => {
    if (done) return;
    markDirty(key, null);
    if (input.value === shown) return;
    done = true;
    input.closest('label, .cover-row, .leaf-row')?.querySelector('.field-problem')?.remove();
    const parsed = parse(input.value, label);
    if (parsed.error) {
      input.value = shown; // the stored value stays, and is shown again
      done = false;
      showProblem(input, `${parsed.error}. Still stored: ${shown === '' ? 'empty (not assessed)' : shown}.`);
      return;
    }
    onCommit(parsed.value, input);
  };
  input.addEventListener('input', () => markDirty(key, input.value === shown ? null : commit));
  input.addEventListener('change', commit);
  // A value carried over a redraw is not "changed" for the browser: leaving
  // the field commits it all the same.
  input.addEventListener('blur', commit);
  input.addEventListener('keydown', (e) => {
    if (e.key === 'Enter') commit();
  });
  return input;
}

/**
 * A one-shot action button: disabled from the first tap until its answer,
 * with one operation id for as long as it is on screen (a second request
 * from it, sent before the redraw, is answered with the first answer).
 */
function actionButton(text, onTap, attrs = {}) {
  const opId = newOpId();
  const button = h('button', {
    ...attrs,
    onclick: async (e) => {
      const b = e.currentTarget;
      if (b.disabled) return;
      b.disabled = true;
      b.setAttribute('aria-busy', 'true');
      try {
        await onTap(opId);
      } finally {
        if (b.isConnected) {
          b.disabled = false;
          b.removeAttribute('aria-busy');
        }
      }
    },
  }, text);
  return button;
}

/** A finished action in the place of its button, so the layout does not move. */
function doneMark(text, attrs = {}) {
  return h('button', { class: 'done-action', disabled: true, ...attrs }, text);
}

/**
 * The class buttons of a scale and a "Clear" button at the row's end (not
 * assessed). A second tap on the chosen class keeps it (it never clears:
 * a double tap must not undo the first), and every button keeps its place.
 */
function classButtons(classes, chosenCode, onChoose, onClear, { disabled = false, label = '' } = {}) {
  return h('div', { class: 'classes' },
    classes.map((k) => {
      const chosen = chosenCode === k.code;
      const content = [h('strong', {}, k.code), h('small', {}, fmt.range(k))];
      const attrs = { class: chosen ? 'class chosen' : 'class', 'aria-pressed': chosen ? 'true' : 'false', disabled };
      return chosen || disabled ? h('button', attrs, content) : actionButton(content, (opId) => onChoose(k.code, opId), attrs);
    }),
    actionButton('Clear', onClear, { class: 'class clear', disabled: disabled || !chosenCode, 'aria-label': `${label} clear: not assessed`.trim() }));
}

function header() {
  const t = sheet.treatment;
  const stocked = sheet.animals
    .filter((a) => a.planned !== null || a.stocked > 0)
    .map((a) => `${a.taxon.code} ${a.stocked + a.restocked - a.removed} put in`);
  const predators = { none: 'no predator', lethal: 'predator can kill', risk: 'predator cannot kill (risk only)' };
  return h(
    'section',
    { class: 'sheet-head' },
    h('div', { class: 'row' },
      h('a', { class: 'button back', href: '#/route' }, '← Route'),
      nextCageButton()),
    h('h1', {}, h('span', { class: 'cage-label' }, sheet.label), ` Block ${sheet.block}`),
    h('p', { class: 'treatment' }, `${t.code} · ${t.name} — ${t.herbivores ? 'herbivores' : 'no herbivores'}, ${predators[t.predator_mode]}`),
    h(
      'p',
      { class: 'facts' },
      `Day ${sheet.day} · ${sheet.date}`,
      sheet.days_since_stocking !== null ? ` · ${sheet.days_since_stocking} days since stocking` : ' · not stocked yet',
      stocked.length ? ` · ${stocked.join(', ')}` : '',
    ),
    sheet.due.length ? h('p', { class: 'due' }, `Due today: ${sheet.due.map((k) => fmt.kind[k]).join(', ')}`) : null,
    // Planned on an earlier day, still within its grace days: to do today (as on the route).
    sheet.late?.length ? h('p', { class: 'due late' }, `Still to do: ${sheet.late.map((p) => `${fmt.kind[p.kind]} day ${p.day}`).join(', ')}`) : null,
  );
}

/** The next cage on the route that still has work today (after this one). */
function nextCageButton() {
  return h('button', {
    class: 'next-cage',
    onclick: async () => {
      const route = await call('route', { date: app.date || undefined });
      const cages = route.blocks.flatMap((b) => b.cages);
      const todo = (c) => c.state === 'not_started' || c.state === 'partial' || c.state === 'overdue' || (c.late ?? []).length > 0;
      const at = cages.findIndex((c) => c.enclosure_id === sheet.enclosure_id);
      const next = [...cages.slice(at + 1), ...cages.slice(0, at)].find(todo);
      if (next) location.hash = `#/cage/${next.enclosure_id}`;
      else toast('No other cage has work left today.');
    },
  }, 'Next cage due →');
}

function historyLink(table, id) {
  return id ? h('a', { class: 'history-link', href: `#/history/${table}/${id}` }, 'History') : null;
}

function censusSection() {
  const rows = sheet.animals.map((a) => {
    const today = a.today ?? {};
    const key = (field) => `census:${a.taxon.id}:${field}`;
    const commit = (field, label) => (v, input) => {
      saveAndReload('save_census', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, [field]: v, base: { [field]: today[field] ?? null } },
        { label: `${a.taxon.code} ${label.toLowerCase()} ${v ?? '(empty)'}`, table: 'census' }, input);
    };
    const count = (field, label) => h('label', {}, label, numberField({
      key: key(field), stored: today[field], label, parse: parseCount, onCommit: commit(field, label),
      attrs: { name: field, 'aria-label': `${a.taxon.code} ${field}` },
    }));
    const plannedText = a.planned === null ? 'not stocked in this treatment' : `${a.planned} per cage${a.restock_below !== null ? `, restock below ${a.restock_below}` : ''}`;
    const hints = [];
    if (a.planned === null && (today.alive ?? 0) > 0) hints.push(h('p', { class: 'hint warn' }, 'Found where none should be: note how it got in, and record a removal below if you take them out.'));
    hints.push(accountedFor(a, today));
    const restockedToday = sheet.stocking_today.filter((e) => e.taxon_id === a.taxon.id && e.kind === 'restock').reduce((s, e) => s + e.count, 0);
    if (a.restock_suggested) {
      hints.push(h('p', { class: 'hint restock' }, `Below the restock threshold: add ${a.restock_suggested}? `,
        actionButton(`Restock ${a.restock_suggested}`, (opId) => saveAndReload('save_stocking', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, kind: 'restock', count: a.restock_suggested },
          { label: `restocked ${a.restock_suggested} ${a.taxon.code}`, table: 'stocking_event', opId }), { class: 'small' })));
    } else if (restockedToday > 0) {
      // In the place of the prompt: a second tap lands here, and does nothing.
      hints.push(h('p', { class: 'hint restock' }, `Restocked today: ${restockedToday} `, doneMark(`Restocked ${restockedToday} ✓`, { class: 'small done-action' })));
    }
    const note = h('input', {
      type: 'text', class: 'note', value: today.notes ?? '', 'aria-label': `${a.taxon.code} note`, placeholder: 'Note', dataset: { key: key('notes') },
    });
    let noteSent = today.notes ?? '';
    const commitNote = () => {
      markDirty(key('notes'), null);
      if (note.value === noteSent) return;
      noteSent = note.value;
      saveAndReload('save_census', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, notes: note.value, base: { notes: today.notes ?? null } },
        { label: `${a.taxon.code} note`, table: 'census' }, note);
    };
    note.addEventListener('input', () => markDirty(key('notes'), note.value === (today.notes ?? '') ? null : commitNote));
    note.addEventListener('change', commitNote);
    note.addEventListener('blur', commitNote);
    return h(
      'div',
      { class: 'census-row', dataset: { taxon: a.taxon.code } },
      h('div', { class: 'who' }, h('strong', {}, a.taxon.code), ` ${a.taxon.common_name ?? a.taxon.scientific_name}`,
        h('small', {}, plannedText, a.last_alive !== null ? ` · last census ${a.last_alive} alive` : ''), historyLink('census', today.id)),
      count('alive', 'Alive'),
      count('dead', 'Dead'),
      count('missing', 'Missing'),
      h('label', { class: 'note-field' }, 'Note', note),
      hints,
    );
  });
  return h('section', { class: 'card', id: 'census' }, h('h2', {}, 'Animals: census and stocking'), stockingRow(), rows, otherStocking());
}

/** Alive + dead + missing against the animals the cage held: warns at once when they do not add up. */
function accountedFor(a, today) {
  if (a.at_risk === null || a.at_risk === undefined) return null;
  const parts = [today.alive, today.dead, today.missing];
  if (parts.every((p) => p === null || p === undefined)) return h('p', { class: 'hint accounted' }, `To account for: ${a.at_risk} (alive + dead + missing)`);
  const sum = parts.reduce((s, p) => s + (p ?? 0), 0);
  // Still entering: say how far it has got; warn once all three are in (or too many already).
  if (parts.some((p) => p === null || p === undefined) && sum <= a.at_risk) {
    return h('p', { class: 'hint accounted' }, `So far ${sum} of ${a.at_risk} accounted for (alive + dead + missing)`);
  }
  const ok = sum === a.at_risk;
  return h('p', { class: ok ? 'hint accounted' : 'hint accounted warn', role: ok ? null : 'alert' },
    `Accounted for: ${today.alive ?? '–'} alive + ${today.dead ?? '–'} dead + ${today.missing ?? '–'} missing = ${sum} of ${a.at_risk}${ok ? ' ✓' : ' — does not add up: count again'}`);
}

/** One button per planned taxon, in a fixed place: "Stock" until done, then a finished mark. */
function stockingRow() {
  const planned = sheet.animals.filter((a) => a.planned !== null);
  if (!planned.length) return null;
  return h('div', { class: 'row stock-row' }, planned.map((a) => a.stocked > 0
    ? doneMark(`${a.taxon.code} stocked (${a.stocked}) ✓`, { dataset: { taxon: a.taxon.code } })
    : actionButton(`Stock ${a.planned} ${a.taxon.code}`, (opId) => saveAndReload('save_stocking', { enclosure_id: sheet.enclosure_id, taxon_id: a.taxon.id, kind: 'initial', count: a.planned },
      { label: `stocked ${a.planned} ${a.taxon.code}`, table: 'stocking_event', opId }), { dataset: { taxon: a.taxon.code }, class: 'stock' })));
}

/** Stocking with another count, stage or sex than the plan, and removals (with a reason). */
function otherStocking() {
  const animals = sheet.animals;
  const taxon = h('select', { 'aria-label': 'Animal', name: 'taxon' }, animals.map((a) => h('option', { value: a.taxon.id }, a.taxon.code)));
  const kind = h('select', { 'aria-label': 'What', name: 'kind' },
    h('option', { value: 'removal' }, 'Taken out'), h('option', { value: 'initial' }, 'Stocked (not as planned)'), h('option', { value: 'restock' }, 'Restocked'));
  const count = h('input', { type: 'text', inputmode: 'numeric', class: 'number', name: 'count', 'aria-label': 'How many' });
  const stage = h('input', { type: 'text', name: 'stage', 'aria-label': 'Stage', placeholder: 'Stage' });
  const sex = h('select', { 'aria-label': 'Sex', name: 'sex' }, h('option', { value: '' }, 'Sex: not noted'), ['female', 'male', 'mixed', 'unknown'].map((s) => h('option', { value: s }, s)));
  const reason = h('input', { type: 'text', name: 'reason', 'aria-label': 'Reason or note', placeholder: 'Reason or note (for a removal: why)' });
  const form = h('div', { class: 'form other-stocking' });
  const go = actionButton('Record', async (opId) => {
    form.querySelector('.field-problem')?.remove();
    const parsed = parseCount(count.value, 'How many');
    if (parsed.error || parsed.value === null || parsed.value === 0) {
      showProblem(form, parsed.error ?? 'How many: give a number of animals (1 or more)');
      return;
    }
    if (kind.value === 'removal' && !reason.value.trim()) {
      showProblem(form, 'Reason: say why the animals were taken out');
      return;
    }
    const code = animals.find((a) => a.taxon.id === taxon.value)?.taxon.code;
    await saveAndReload('save_stocking', {
      enclosure_id: sheet.enclosure_id, taxon_id: taxon.value, kind: kind.value, count: parsed.value,
      stage: stage.value.trim() || undefined, sex: sex.value || undefined, notes: reason.value.trim() || undefined,
    }, { label: `${kind.value} ${parsed.value} ${code}`, table: 'stocking_event', opId }, form);
  }, { class: 'small' });
  clear(form, taxon, kind, h('label', {}, 'How many', count), stage, sex, reason, go);
  return h('details', { class: 'other' }, h('summary', {}, 'Other stocking or a removal'), form);
}

function coverTargets() {
  return [
    ...sheet.plants.map((p) => ({ key: p.id, taxon_id: p.id, code: p.code, name: p.common_name ?? p.scientific_name })),
    ...sheet.cover.ground.map((g) => ({ key: g.code, category: g.code, code: g.code, name: g.name })),
    ...(sheet.cover.layered ? [{ key: 'vegetation', category: 'vegetation', code: 'vegetation', name: 'Overall vegetation' }] : []),
  ];
}

function recordFor(t) {
  return sheet.cover_records.find((r) => (t.taxon_id ? r.taxon_id === t.taxon_id : r.category === t.category));
}

/** Cover is recorded on cover-survey days; on another day only when asked for. */
function coverWanted() {
  const kinds = [...sheet.due, ...(sheet.late ?? []).map((p) => p.kind)];
  return kinds.includes('cover') || sheet.visits.some((v) => v.kind === 'cover') || coverAskedFor;
}

function coverSection() {
  const c = sheet.cover;
  const title = h('h2', {}, `Cover (${c.method === 'percent' ? 'percent' : c.method === 'class' ? 'cover classes' : `pin frame, ${c.pins_per_frame} pins`})`);
  if (!coverWanted()) {
    return h('section', { class: 'card', id: 'cover' }, title,
      h('p', {}, 'No cover survey is due at this cage today.'),
      h('button', { class: 'small', id: 'unscheduled-cover', onclick: () => { coverAskedFor = true; paint(); } }, 'Record an unscheduled cover survey'));
  }
  const targets = coverTargets();
  const saveCover = (t, rec, value, label, where, opId) =>
    saveAndReload('save_cover', { enclosure_id: sheet.enclosure_id, taxon_id: t.taxon_id, category: t.category, ...value, base: { cover_pct: rec?.cover_pct ?? null } },
      { label: `${t.code} cover ${label}`, table: 'cover_record', opId }, where);
  const rows = targets.map((t) => {
    const rec = recordFor(t);
    let control;
    if (c.method === 'percent') {
      control = numberField({
        key: `cover:${t.key}`, stored: rec?.value_pct, label: `${t.code} percent`, parse: parsePercent, decimal: true,
        onCommit: (v, input) => saveCover(t, rec, v === null ? {} : { percent: v }, v === null ? 'not assessed' : `${v} %`, input),
        attrs: { 'aria-label': `${t.code} percent` },
      });
    } else if (c.method === 'class') {
      control = classButtons(c.classes, rec?.class_code,
        (code, opId) => saveCover(t, rec, { class_code: code }, `class ${code}`, null, opId),
        (opId) => saveCover(t, rec, {}, 'cleared', null, opId), { label: t.code });
    } else {
      const hits = rec?.pin_hits ?? 0;
      control = h('div', { class: 'counter' },
        actionButton('−', (opId) => saveCover(t, rec, { pin_hits: hits - 1 }, `${hits - 1} hits`, null, opId), { 'aria-label': `${t.code} one hit less`, disabled: hits <= 0 }),
        h('output', { 'aria-label': `${t.code} hits` }, rec ? String(hits) : '–'),
        actionButton('+', (opId) => saveCover(t, rec, { pin_hits: hits + 1 }, `${hits + 1} hits`, null, opId), { 'aria-label': `${t.code} one hit more` }));
    }
    return h('div', { class: 'cover-row', dataset: { target: t.code } },
      h('div', { class: 'who' }, h('strong', {}, t.code), ` ${t.name}`,
        h('small', {}, rec?.cover_pct !== undefined && rec?.cover_pct !== null ? fmt.pct(rec.cover_pct) : rec ? 'not assessed' : ''), historyLink('cover_record', rec?.id)),
      control);
  });
  return h('section', { class: 'card', id: 'cover' }, title, coverHint(), rows);
}

/** The running total while entering, so an impossible sum shows at once. */
function coverHint() {
  const c = sheet.cover;
  const recs = sheet.cover_records.filter((r) => r.category !== 'vegetation');
  if (c.method === 'pins') {
    const hits = recs.reduce((s, r) => s + (r.pin_hits ?? 0), 0);
    const ok = c.hit_rule !== 'first' || hits === c.pins_per_frame;
    return h('p', { class: ok ? 'total' : 'total warn', id: 'cover-total' }, `Hits so far: ${hits} of ${c.pins_per_frame} pins${c.hit_rule === 'first' ? ' (first hits must add up to the frame)' : ''}`);
  }
  const total = recs.reduce((s, r) => s + (r.cover_pct ?? 0), 0);
  const lo = 100 - c.tolerance_pct;
  const hi = 100 + c.tolerance_pct;
  const ok = c.layered || (total >= lo && total <= hi);
  const text = c.layered ? `Species total ${fmt.pct(total)} (layers may overlap)` : `Species + ground: ${fmt.pct(total)} (should be 100 ± ${c.tolerance_pct})`;
  return h('p', { class: ok ? 'total' : 'total warn', id: 'cover-total' }, text);
}

function damageSection() {
  const d = sheet.damage;
  const live = sheet.leaves.filter((l) => !l.leaf.fate);
  const rows = sheet.leaves.map(({ leaf, previous, today, taxon_code }) => {
    const saveDamage = (value, label, where, opId) => saveAndReload('save_damage', { leaf_id: leaf.id, ...value, base: { damage_pct: today?.damage_pct ?? null } },
      { label: `${leaf.tag_label} damage ${label}`, table: 'damage_record', opId }, where);
    let control;
    if (d.method === 'class') {
      // A leaf with a fate keeps its buttons, disabled, so nothing moves.
      control = classButtons(d.classes, today?.class_code,
        (code, opId) => saveDamage({ class_code: code }, `class ${code}`, null, opId),
        (opId) => saveDamage({}, 'cleared', null, opId), { disabled: Boolean(leaf.fate), label: leaf.tag_label });
    } else {
      // Cleared = not assessed (never 0 %, which says "looked, no damage").
      control = numberField({
        key: `damage:${leaf.id}`, stored: today?.value_pct, label: `${leaf.tag_label} percent`, parse: parsePercent, decimal: true,
        onCommit: (v, input) => saveDamage(v === null ? {} : { percent: v }, v === null ? 'not assessed' : `${v} %`, input),
        attrs: { 'aria-label': `${leaf.tag_label} percent`, disabled: Boolean(leaf.fate) },
      });
    }
    const fateButtons = leaf.fate ? h('div', { class: 'row' },
      h('p', { class: 'fate' }, `Leaf ${leaf.fate} on ${leaf.fate_on}`),
      doneMark(leaf.fate === 'lost' ? 'Leaf lost ✓' : 'Replaced ✓', { class: 'small done-action' })) : h('div', { class: 'row' },
      actionButton('Leaf lost', (opId) => saveAndReload('set_leaf_fate', { leaf_id: leaf.id, fate: 'lost' }, { label: `${leaf.tag_label} lost`, table: 'tagged_leaf', opId }), { class: 'small' }),
      actionButton('Replaced', async (opId) => {
        const label = prompt(`Label of the new tag replacing ${leaf.tag_label} (same species: ${taxon_code}):`, freeLabel(`${leaf.tag_label}b`));
        if (label) await saveAndReload('set_leaf_fate', { leaf_id: leaf.id, fate: 'replaced', replacement_label: label }, { label: `${leaf.tag_label} replaced by ${label}`, table: 'tagged_leaf', opId });
      }, { class: 'small' }));
    const before = previous ? `before: ${previous.class_code ?? ''} ${fmt.pct(previous.damage_pct)}` : 'first score';
    const lower = previous && today && today.damage_pct !== null && today.damage_pct < previous.damage_pct ? h('p', { class: 'hint warn' }, 'Lower than before: damage on a tagged leaf only grows. Check the leaf and the tag.') : null;
    return h('div', { class: 'leaf-row', dataset: { tag: leaf.tag_label } },
      h('div', { class: 'who' }, h('strong', {}, leaf.tag_label), ` ${taxon_code}`, h('small', {}, before), historyLink('damage_record', today?.id)), control, lower, fateButtons);
  });
  // The tag form stands above the leaves and stays in place when full, so
  // a second tap on "Tag leaf" never lands on the new leaf's row.
  const tagForm = tagLeafForm(live.length, d.leaves_per_enclosure);
  return h('section', { class: 'card', id: 'damage' }, h('h2', {}, `Leaf damage (${d.method === 'class' ? 'damage classes' : 'percent leaf area removed'})`),
    h('p', { class: 'hint' }, 'Compare with the class ranges on each button: small damage is easy to overestimate.'), tagForm, rows);
}

/** A tag label not used in this cage yet, starting from `wanted`. */
function freeLabel(wanted) {
  const used = new Set(sheet.leaves.map((l) => l.leaf.tag_label));
  if (!used.has(wanted)) return wanted;
  for (let i = 2; ; i++) if (!used.has(`${wanted}${i}`)) return `${wanted}${i}`;
}

function tagLeafForm(n, wanted) {
  if (n >= wanted) return h('div', { class: 'row tag-form' }, doneMark(`All ${wanted} leaves tagged ✓`));
  const used = new Set(sheet.leaves.map((l) => l.leaf.tag_label));
  let k = n + 1;
  while (used.has(`${sheet.label}-T${k}`)) k += 1;
  const select = h('select', { 'aria-label': 'Plant of the new leaf' }, sheet.plants.map((p) => h('option', { value: p.id }, `${p.code} ${p.common_name ?? ''}`)));
  const label = h('input', { value: `${sheet.label}-T${k}`, 'aria-label': 'Tag label' });
  return h('div', { class: 'row tag-form form' }, select, label,
    actionButton('Tag leaf', (opId) => saveAndReload('tag_leaf', { enclosure_id: sheet.enclosure_id, taxon_id: select.value, tag_label: label.value }, { label: `tagged ${label.value}`, table: 'tagged_leaf', opId }, label)));
}

function visitsSection() {
  if (!sheet.visits.length) return h('section', { class: 'card', id: 'visits' }, h('h2', {}, 'Visits today'), h('p', {}, 'Nothing recorded here today yet.'));
  return h('section', { class: 'card', id: 'visits' }, h('h2', {}, 'Visits today'), sheet.visits.map((v) => {
    const text = (field, el, stored) => {
      const key = `visit:${v.id}:${field}`;
      let sent = stored ?? '';
      const commit = () => {
        markDirty(key, null);
        if (el.value === sent) return;
        sent = el.value;
        saveAndReload('update_visit', { visit_id: v.id, [field]: el.value }, { label: field, table: 'visit' }, el);
      };
      el.dataset.key = key;
      el.addEventListener('input', () => markDirty(key, el.value === (stored ?? '') ? null : commit));
      el.addEventListener('change', commit);
      el.addEventListener('blur', commit);
      return el;
    };
    return h('div', { class: 'visit-row', dataset: { kind: v.kind } },
      h('strong', {}, fmt.kind[v.kind]), v.day !== null ? ` (day ${v.day})` : ' (unscheduled)',
      h('label', {}, 'Observer', text('observer', h('input', { value: v.observer ?? '' }), v.observer)),
      h('label', {}, 'Notes', text('notes', h('textarea', { rows: 2 }, v.notes ?? ''), v.notes)),
      v.completed ? doneMark('Done ✓', { class: 'done-action done' })
        : actionButton(`Finish ${fmt.kind[v.kind].toLowerCase()}`, (opId) => saveAndReload('update_visit', { visit_id: v.id, completed: true }, { label: `${fmt.kind[v.kind]} done`, table: 'visit', opId })),
      historyLink('visit', v.id));
  }));
}

/**
 * Draw the sheet from the stored state. What is being typed survives the
 * redraw (a save of another field redraws the whole sheet): fields typed
 * into and not yet saved keep their text and stay marked, and the field
 * with the cursor keeps it.
 */
function paint() {
  const typed = root
    ? [...root.querySelectorAll('input[data-key], textarea[data-key]')].filter((el) => app.dirty.has(el.dataset.key)).map((el) => [el.dataset.key, el.value])
    : [];
  const focused = root?.contains(document.activeElement) ? document.activeElement.dataset?.key : undefined;
  setWhere(app.overview?.site, `Day ${sheet.day}`, `Cage ${sheet.label}`);
  clear(root, header(), censusSection(), coverSection(), damageSection(), visitsSection(), safetyCard());
  const at = (key) => root.querySelector(`[data-key="${CSS.escape(key)}"]`);
  for (const [key, value] of typed) {
    const el = at(key);
    if (!el) continue;
    el.value = value;
    el.dispatchEvent(new Event('input'));
  }
  if (focused) at(focused)?.focus();
}

export async function showSheet(main, enclosureId, shownAs) {
  const next = await call('sheet', { enclosure_id: enclosureId, date: app.date || undefined });
  if (!current(shownAs)) return;
  if (sheet?.enclosure_id !== enclosureId) coverAskedFor = false;
  root = main;
  view = shownAs;
  sheet = next;
  paint();
  // Opening a cage opens its sheet at the top.
  scrollTo(0, 0);
  if (!app.observer) toast('Set the observer on the route screen so visits carry your name.');
}

register('cage', showSheet, 1);
