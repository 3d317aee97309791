// fieldcage tablet UI: the entry module index.html loads. It imports every
// screen (each registers itself with the shell), starts the sync state in the
// header and then the shell. Nothing imports this module.

import { start } from './shell.js';
import { watchSync } from './sync.js';
import './route.js';
import './sheet.js';
import './history.js';
import './review.js';
import './results.js';
import './settings.js';
import './conflicts.js';

watchSync();
start();
