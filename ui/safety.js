// The field-safety card: shown on the route and at the foot of every cage
// sheet. The usual cautions; local regulations and institutional rules come
// first.

import { h } from './dom.js';

export function safetyCard() {
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
