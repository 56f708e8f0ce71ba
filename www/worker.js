// Module worker of the served page: one wasm instance, fetched from the page's own origin.
import init, * as pg from './pkg/patchgraph.js';
import { installWorker } from './worker-core.js';

installWorker(pg, init());
