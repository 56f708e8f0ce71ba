// A whole file through runs: each image of it (a page, or one channel of a page) denoised on its
// own in the workers, then the file put back together in its own format, with every page,
// channel and its metadata. Used by a pane's "Save result" and by the batch.
import { task, call, Stopped } from './tasks.js';
import { splitRun } from './stitch.js';

// One image: patch-graph runs split into bands across the workers; pixel-graph runs take one.
// With `estimate`, a pixel-graph run makes its error estimate's pass before it returns; a
// patch-graph run keeps its planes (`methodPlanes`) for the pass, which `splitEstimate` makes.
export function runImage(bytes, settings, method, onProgress, estimate = false) {
  return method === 'patch-graph' ? splitRun(bytes, settings, onProgress, estimate) : task('denoise', { bytes, settings, estimate }, onProgress);
}

// Returns {promise, stop}; the promise gives {file, extension, reports}. `done(k)` may give a
// result already made for image k with these settings; `keep(k, r)` sees each new one.
export function runWholeFile(file, units, settings, method, onProgress, done = () => null, keep = () => {}) {
  let current = null;
  let stopped = false;
  const promise = (async () => {
    const results = [];
    for (let k = 0; k < units; k += 1) {
      const have = done(k);
      if (have) { results.push(have); continue; }
      if (stopped) throw new Stopped('stopped');
      const bytes = units > 1 ? (await call('unitFile', { bytes: file.slice(), unit: k })).file : file.slice();
      const label = (s) => (units > 1 ? `image ${k + 1} of ${units}: ${s}` : s);
      current = runImage(bytes, settings, method, (f, s) => onProgress((k + f) / units, label(s)));
      const r = await current.promise;
      current = null;
      r.report = typeof r.report === 'string' ? JSON.parse(r.report) : r.report;
      keep(k, r);
      results.push(r);
    }
    if (units === 1) return { file: results[0].file, extension: results[0].extension, reports: [results[0].report] };
    onProgress(1, 'putting the file back together');
    const out = await call('assemble', { bytes: file.slice(), results: results.map((r) => r.file.slice()), settings });
    return { file: out.file, extension: out.extension, reports: results.map((r) => r.report) };
  })();
  return { promise, stop: () => { stopped = true; if (current) current.stop(); } };
}
