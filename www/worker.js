// Module worker of the served page: one wasm instance, fetched from the page's own origin. The
// SIMD build when the browser validates a SIMD instruction, else the baseline build (the same
// code without simd128); `?baseline` on the worker's address forces the baseline (for tests).
import init, * as pg from './pkg/patchgraph.js';
import { installWorker, simdSupported } from './worker-core.js';

const baseline = new URLSearchParams(self.location.search).has('baseline') || !simdSupported();
const wasm = new URL(baseline ? './pkg/patchgraph_base_bg.wasm' : './pkg/patchgraph_bg.wasm', import.meta.url);
installWorker(pg, init({ module_or_path: wasm }), baseline ? 'baseline' : 'simd128');
