// Work off the main thread: each task gets a fresh worker (its own wasm instance), so stopping a
// run is terminating its worker, and a crashed worker takes nothing else down. At most `limit`
// workers run at once; later tasks wait their turn.
const limit = Math.max(1, Math.min(navigator.hardwareConcurrency || 2, 4));
let running = 0;
const waiting = [];

function acquire() {
  if (running < limit) { running += 1; return Promise.resolve(); }
  return new Promise((resolve) => waiting.push(resolve));
}

function release() {
  const next = waiting.shift();
  if (next) next(); else running -= 1;
}

export class Stopped extends Error {}

// The one-file page sets globalThis.patchgraphWorkerUrl to a blob: URL of a classic worker; the
// served page uses the module worker beside this file.
function newWorker() {
  if (globalThis.patchgraphWorkerUrl) return new Worker(globalThis.patchgraphWorkerUrl);
  return new Worker(new URL('./worker.js', import.meta.url), { type: 'module' });
}

// Returns {promise, stop}. `onProgress(fraction, stage)` receives progress messages.
export function task(kind, payload = {}, onProgress = null) {
  let worker = null;
  let finished = false;
  let reject;
  const promise = new Promise((resolve, rej) => {
    reject = rej;
    acquire().then(() => {
      if (finished) { release(); return; }
      worker = newWorker();
      const done = () => { finished = true; worker.terminate(); release(); };
      worker.onmessage = (e) => {
        const m = e.data;
        if ('progress' in m) { if (onProgress) onProgress(m.progress, m.stage); return; }
        done();
        if (m.ok) resolve(m.r); else rej(new Error(m.message));
      };
      worker.onerror = (e) => {
        e.preventDefault();
        done();
        rej(new Error(`the computation stopped unexpectedly${e.message ? `: ${e.message}` : ''}`));
      };
      worker.postMessage({ kind, ...payload });
    });
  });
  const stop = () => {
    if (finished) return;
    finished = true;
    if (worker) { worker.terminate(); release(); }
    reject(new Stopped('stopped'));
  };
  return { promise, stop };
}

export const call = (kind, payload) => task(kind, payload).promise;
