// Work off the main thread: a pool of workers (one per core, at most 4), each with its own wasm
// instance, reused from job to job. Stopping a job terminates its worker and a fresh one takes its
// place later, so a stop is immediate and a crashed worker takes nothing else down. A worker whose
// wasm memory grew large (memory never shrinks) is retired after its job to give it back.
// `?workers=N` on the page's address sets the pool size (1 to 4), for comparisons and benchmarks.
const query = new URLSearchParams(globalThis.location ? location.search : '');
const asked = Math.floor(Number(query.get('workers')));
export const poolSize = asked >= 1 ? Math.min(asked, 4) : Math.max(1, Math.min(navigator.hardwareConcurrency || 2, 4));
const RETIRE_BYTES = 512 * 1024 * 1024;
const idle = [];
const queue = [];
let alive = 0;

export class Stopped extends Error {}

// The one-file page sets globalThis.patchgraphWorkerUrl to a blob: URL of a classic worker; the
// served page uses the module worker beside this file.
function makeWorker() {
  if (globalThis.patchgraphWorkerUrl) return new Worker(globalThis.patchgraphWorkerUrl);
  const base = query.get('wasm') === 'baseline';
  return new Worker(new URL(base ? './worker.js?baseline' : './worker.js', import.meta.url), { type: 'module' });
}

function newWorker() {
  alive += 1;
  return makeWorker();
}

function retire(worker) {
  worker.terminate();
  alive -= 1;
}

function pump() {
  while (queue.length && (idle.length || alive < poolSize)) {
    const job = queue.shift();
    job.start(idle.pop() || newWorker());
  }
}

// Returns {promise, stop}. `onProgress(fraction, stage)` receives the worker's progress; buffers
// in `transfer` move to the worker instead of being copied.
export function task(kind, payload = {}, onProgress = null, transfer = []) {
  let worker = null;
  let settled = false;
  let resolve;
  let reject;
  const promise = new Promise((res, rej) => { resolve = res; reject = rej; });
  const job = {
    start(w) {
      worker = w;
      const free = (keep) => {
        worker.onmessage = null;
        worker.onerror = null;
        if (keep) idle.push(worker); else retire(worker);
        worker = null;
        pump();
      };
      w.onmessage = (e) => {
        const m = e.data;
        if ('progress' in m) { if (onProgress) onProgress(m.progress, m.stage); return; }
        settled = true;
        free(m.ok && !(m.memoryBytes > RETIRE_BYTES));
        if (m.ok) resolve(m.r); else reject(new Error(m.message));
      };
      w.onerror = (e) => {
        e.preventDefault();
        settled = true;
        free(false);
        reject(new Error(`the computation stopped unexpectedly${e.message ? `: ${e.message}` : ''}`));
      };
      w.postMessage({ kind, ...payload }, transfer);
    },
  };
  queue.push(job);
  pump();
  const stop = () => {
    if (settled) return;
    settled = true;
    const i = queue.indexOf(job);
    if (i >= 0) queue.splice(i, 1);
    if (worker) { worker.onmessage = null; worker.onerror = null; retire(worker); worker = null; pump(); }
    reject(new Stopped('stopped'));
  };
  return { promise, stop };
}

export const call = (kind, payload, transfer) => task(kind, payload, null, transfer).promise;

// A worker of its own, outside the pool (not counted in its size), for work that keeps state from one request to the next
// (a split run's band assembler). Requests run in the order sent. Returns {call, stop}; `call`
// gives a promise of the reply; `stop` ends the worker and fails what is still waiting.
export function ownWorker() {
  const worker = makeWorker();
  const waiting = [];
  let ended = false;
  const fail = (error) => { while (waiting.length) waiting.shift().reject(error); };
  worker.onmessage = (e) => {
    const m = e.data;
    if ('progress' in m) return;
    const w = waiting.shift();
    if (w) { if (m.ok) w.resolve(m.r); else w.reject(new Error(m.message)); }
  };
  worker.onerror = (e) => {
    e.preventDefault();
    fail(new Error(`the computation stopped unexpectedly${e.message ? `: ${e.message}` : ''}`));
  };
  const call = (kind, payload = {}, transfer = []) => {
    if (ended) return Promise.reject(new Stopped('stopped'));
    return new Promise((resolve, reject) => {
      waiting.push({ resolve, reject });
      worker.postMessage({ kind, ...payload }, transfer);
    });
  };
  const stop = () => {
    if (ended) return;
    ended = true;
    worker.terminate();
    fail(new Stopped('stopped'));
  };
  return { call, stop };
}
