// A whole file through runs: each image of it (a page, or one channel of a page) denoised on its
// own in the workers, then the file put back together in its own format, with every page,
// channel and its metadata. Used by a pane's "Save result" and by the batch.
import { task, call, Stopped } from './tasks.js';
import { splitRun } from './stitch.js';

// Whether a file of `pages` pages is denoised as a volume under these settings (JSON): each
// image then takes patches from the pages around it (the core decides which pages continue it).
export function asVolume(settings, pages) {
  const s = JSON.parse(settings);
  return pages > 1 && s.method === 'patch-graph' && s.patch_graph.neighbour_slices > 0;
}

// One image: patch-graph runs split into bands across the workers; pixel-graph runs take one.
// With `estimate`, a pixel-graph run makes its error estimate's pass before it returns; a
// patch-graph run keeps its planes (`methodPlanes`) for the pass, which `splitEstimate` makes.
// `stack` ({file, unit, pages, units}) runs image `unit` of a stack as a slice of its volume,
// in one worker that decodes only the pages it reads.
export function runImage(bytes, settings, method, onProgress, estimate = false, stack = null) {
  if (stack) return task('denoiseSlice', { bytes: stack.file, ...stack, settings, estimate }, onProgress);
  return method === 'patch-graph' ? splitRun(bytes, settings, onProgress, estimate) : task('denoise', { bytes, settings, estimate }, onProgress);
}

// Returns {promise, stop}; the promise gives {file, extension, reports}. `done(k)` may give a
// result already made for image k with these settings; `keep(k, r)` sees each new one. The
// slices of a volume run side by side, one worker each; other images one after another, each
// across all workers.
export function runWholeFile(file, units, settings, method, onProgress, done = () => null, keep = () => {}, pages = 1) {
  const running = new Set();
  let stopped = false;
  const volume = asVolume(settings, pages);
  const fractions = new Array(units).fill(0);
  const tell = (k, f, s) => {
    fractions[k] = f;
    onProgress(fractions.reduce((a, b) => a + b, 0) / units, units > 1 ? `image ${k + 1} of ${units}: ${s}` : s);
  };
  const one = async (k) => {
    const have = done(k);
    if (have) { fractions[k] = 1; return have; }
    if (stopped) throw new Stopped('stopped');
    let job;
    if (volume) {
      job = runImage(null, settings, method, (f, s) => tell(k, f, s), false, { file: file.slice(), unit: k, pages, units });
    } else {
      const bytes = units > 1 ? (await call('unitFile', { bytes: file.slice(), unit: k })).file : file.slice();
      if (stopped) throw new Stopped('stopped');
      job = runImage(bytes, settings, method, (f, s) => tell(k, f, s));
    }
    running.add(job);
    try {
      const r = await job.promise;
      r.report = typeof r.report === 'string' ? JSON.parse(r.report) : r.report;
      keep(k, r);
      return r;
    } finally {
      running.delete(job);
    }
  };
  const promise = (async () => {
    const results = [];
    if (volume) {
      // Every slice queued at once: the pool runs as many as it has workers.
      const all = Array.from({ length: units }, (_, k) => one(k));
      try {
        for (const p of all) results.push(await p);
      } catch (e) {
        stopped = true;
        for (const j of running) j.stop();
        await Promise.allSettled(all);
        throw e;
      }
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
