// A whole file through runs: each image of it (a page, or one channel of a page) denoised on its
// own in the workers, then the file put back together in its own format, with every page,
// channel and its metadata. Used by a pane's "Save result" and by the batch.
import { task, call, poolSize, Stopped } from './tasks.js';
import { splitRun } from './stitch.js';

// How the core runs an image of a file of `pages` pages under these settings:
// {volume, bands}. As a volume, each image takes patches from the pages around it (the core
// decides which); a method that splits into bands runs across all workers, others in one.
export const runPlan = (settings, pages) => call('runPlan', { settings, pages });

// One image, as the core's plan says. With `estimate`, a one-worker run makes its error
// estimate's pass before it returns; a split run keeps its planes (`methodPlanes`) for the
// pass, which `splitEstimate` makes. `stack` ({file, unit, pages, units}) names the image's
// place in its file, which runs it as a slice of its volume when the plan says so. `known` is
// the plan when the caller already has it (one request per file, not one per image).
export function runImage(bytes, settings, onProgress, estimate = false, stack = null, known = null) {
  let inner = null;
  let stopped = false;
  const promise = (async () => {
    const plan = known || await runPlan(settings, stack ? stack.pages : 1);
    if (stopped) throw new Stopped('stopped');
    if (plan.volume) {
      const s = runStack(stack.file, [stack.unit], stack.pages, stack.units, settings, onProgress, estimate);
      inner = { promise: s.promise.then((m) => m.get(stack.unit)), stop: s.stop };
    } else {
      inner = plan.bands ? splitRun(bytes, settings, onProgress, estimate) : task('denoise', { bytes, settings, estimate }, onProgress);
    }
    return inner.promise;
  })();
  return { promise, stop: () => { stopped = true; if (inner) inner.stop(); } };
}

// Images `wanted` (in order) of a stack as a volume, split into jobs for any worker: the first
// stage of every image they read (each made once, only the pages it reads decoded), then each
// image's second stage from the first stages around it. First stages are made just ahead of the
// images that need them and let go after, so the page holds a few images' planes, whatever the
// stack's depth. Returns {promise, stop}; the promise gives a Map from image to its result.
export function runStack(file, wanted, pages, units, settings, onProgress, estimate = false, keep = () => {}) {
  const running = new Set();
  let stopped = false;
  const done = new Map();
  let jobs = 0;
  const tell = (id, f, s) => {
    done.set(id, f);
    let sum = 0;
    for (const v of done.values()) sum += v;
    onProgress(Math.min(1, sum / Math.max(jobs, 1)), s);
  };
  const start = (kind, payload, id) => {
    if (stopped) return Promise.reject(new Stopped('stopped'));
    const j = task(kind, { bytes: file.slice(), pages, units, settings, ...payload }, (f, s) => tell(id, f, s));
    running.add(j);
    return j.promise.finally(() => { running.delete(j); tell(id, 1, 'working through the slices'); });
  };
  const promise = (async () => {
    const around = new Map();
    for (const k of wanted) around.set(k, (await call('stackAround', { unit: k, pages, units, settings })).units);
    const users = new Map();
    for (const list of around.values()) for (const j of list) users.set(j, (users.get(j) || 0) + 1);
    // Every job is known now (one first stage per image read, one second stage per image wanted),
    // so the bar only moves forward.
    jobs = users.size + wanted.length;
    const firsts = new Map();
    const first = (j) => {
      if (!firsts.has(j)) firsts.set(j, start('sliceFirst', { unit: j }, `first ${j}`));
      return firsts.get(j);
    };
    const second = async (k) => {
      const basics = [];
      for (const j of around.get(k)) basics.push((await first(j)).planes.map((p) => p.slice()));
      const r = await start('sliceSecond', { unit: k, basics, estimate }, `second ${k}`);
      for (const j of around.get(k)) {
        users.set(j, users.get(j) - 1);
        if (!users.get(j)) firsts.delete(j);
      }
      keep(k, r);
      return [k, r];
    };
    const results = new Map();
    const inflight = [];
    try {
      for (let i = 0; i < wanted.length; i += 1) {
        // The first stages of the next few images start now, so workers never wait.
        for (const k of wanted.slice(i, i + poolSize)) around.get(k).forEach(first);
        inflight.push(second(wanted[i]));
        if (inflight.length >= poolSize) { const [k, r] = await inflight.shift(); results.set(k, r); }
      }
      for (const p of inflight) { const [k, r] = await p; results.set(k, r); }
    } catch (e) {
      stopped = true;
      for (const j of running) j.stop();
      await Promise.allSettled([...inflight, ...firsts.values()]);
      throw e;
    }
    return results;
  })();
  return { promise, stop: () => { stopped = true; for (const j of running) j.stop(); } };
}

// Returns {promise, stop}; the promise gives {file, extension, reports}. `done(k)` may give a
// result already made for image k with these settings; `keep(k, r)` sees each new one. A
// volume's images go through `runStack`; other images one after another, each across all workers.
export function runWholeFile(file, units, settings, onProgress, done = () => null, keep = () => {}, pages = 1) {
  const running = new Set();
  let stopped = false;
  const fractions = new Array(units).fill(0);
  let plan = null;
  const tell = (k, f, s) => {
    fractions[k] = f;
    onProgress(fractions.reduce((a, b) => a + b, 0) / units, units > 1 ? `image ${k + 1} of ${units}: ${s}` : s);
  };
  const one = async (k) => {
    const have = done(k);
    if (have) { fractions[k] = 1; return have; }
    if (stopped) throw new Stopped('stopped');
    const bytes = units > 1 ? (await call('unitFile', { bytes: file.slice(), unit: k })).file : file.slice();
    if (stopped) throw new Stopped('stopped');
    const job = runImage(bytes, settings, (f, s) => tell(k, f, s), false, null, plan);
    running.add(job);
    try {
      const r = await job.promise;
      keep(k, r);
      return r;
    } finally {
      running.delete(job);
    }
  };
  const promise = (async () => {
    const results = [];
    plan = await runPlan(settings, pages);
    if (stopped) throw new Stopped('stopped');
    if (plan.volume) {
      const todo = [];
      for (let k = 0; k < units; k += 1) if (!done(k)) todo.push(k);
      const job = runStack(file, todo, pages, units, settings, (f, s) => onProgress(f, s), false, keep);
      running.add(job);
      const made = await job.promise;
      running.delete(job);
      for (let k = 0; k < units; k += 1) results.push(done(k) || made.get(k));
    } else {
      for (let k = 0; k < units; k += 1) results.push(await one(k));
    }
    if (units === 1) return { file: results[0].file, extension: results[0].extension, reports: [results[0].report] };
    onProgress(1, 'putting the file back together');
    const out = await call('assemble', { bytes: file.slice(), results: results.map((r) => r.file.slice()), settings });
    return { file: out.file, extension: out.extension, reports: results.map((r) => r.report) };
  })();
  return { promise, stop: () => { stopped = true; for (const j of running) j.stop(); } };
}
