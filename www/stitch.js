// One patch-graph run split across the worker pool: a worker prepares the image (noise model,
// colour transform, sigma, the plan of bands); each band of each stage is a job for any worker,
// given only its window of rows; the core's band assembler, in a worker of its own, adds the
// bands' sums into rows (this file only schedules); a worker turns the final planes into the
// result. The arithmetic is the same whatever the number of workers, so
// the result is identical with 1 or 4 of them.
import { task, poolSize, Stopped, ownWorker } from './tasks.js';

// Rows [y0, y1) of every plane (one Float32Array each), end to end: a band's window.
function windowOf(planes, width, y0, y1) {
  const rows = (y1 - y0) * width;
  const win = new Float32Array(planes.length * rows);
  planes.forEach((p, c) => win.set(p.subarray(y0 * width, y1 * width), c * rows));
  return win;
}

// Returns {promise, stop}; the promise gives what the single-worker 'denoise' gives, plus
// `workers` (at most this many ran at once), `peakWorkerBytes`, and its two parts:
// `bandWorkerBytes` (workers running bands) and `wholeImageWorkerBytes` (preparing, finishing).
// With `keep`, it also gives `methodPlanes`, a copy of the method's output planes, which the
// error estimate's pass needs ([`splitEstimate`]).
export function splitRun(bytes, settings, onProgress, keep = false) {
  return split(bytes, settings, onProgress, async (run, prep, planes, bands, peak, t0) => {
    onProgress(0.95, 'writing the result');
    const kept = keep ? planes.map((p) => p.slice()) : null;
    const r = await run('finish', { bytes: bytes.slice(), settings, fitted: prep.fitted, planes }, planes.map((p) => p.buffer));
    r.seconds = (performance.now() - t0) / 1000;
    r.workers = Math.max(1, Math.min(poolSize, bands.length));
    r.peakWorkerBytes = Math.max(peak.band, peak.whole);
    r.bandWorkerBytes = peak.band;
    r.wholeImageWorkerBytes = peak.whole;
    if (kept) r.methodPlanes = kept;
    return r;
  });
}

// The error estimate's second pass: the same run on the input plus a small probe (the noise
// model fitted on the input kept), then the estimate from both passes' planes. The promise
// gives the estimate (the core's ErrorEstimate, as an object).
export function splitEstimate(bytes, settings, resultPlanes, onProgress) {
  return split(bytes, settings, onProgress, async (run, prep, planes) => {
    onProgress(0.97, 'estimating the error');
    const r = await run('estimate', { bytes: bytes.slice(), fitted: prep.fitted, result: resultPlanes, probe: planes },
      [...planes, ...resultPlanes].map((p) => p.buffer));
    return r.estimate;
  }, true);
}

// The shared body: prepare (the probe's input with `probe`), run both stages over the bands,
// then `end(run, prep, planes, bands, peak, t0)`.
function split(bytes, settings, onProgress, end, probe = false) {
  const jobs = new Set();
  // One assembler worker serves both stages of the run (its wasm is loaded once).
  let asmWorker = null;
  let stopped = false;
  // Peak wasm memory of a worker doing band jobs, and of one preparing or finishing the whole image.
  const peak = { band: 0, whole: 0 };
  const run = (kind, payload, transfer = [], onP = null) => {
    if (stopped) return Promise.reject(new Stopped('stopped'));
    const t = task(kind, payload, onP, transfer);
    jobs.add(t);
    const slot = kind === 'band' ? 'band' : 'whole';
    return t.promise.then((r) => { jobs.delete(t); peak[slot] = Math.max(peak[slot], r.memoryBytes || 0); return r; },
      (e) => { jobs.delete(t); throw e; });
  };

  // One stage: bands go out as workers free up (at most a few ahead of the first unfinished band,
  // which bounds the sums the assembler holds), and their sums go to the assembler as they come.
  const stage = (prep, bands, basic, start, span, name) => new Promise((resolve, reject) => {
    const { width, height } = prep;
    asmWorker ||= ownWorker();
    const asm = asmWorker;
    let failed = false;
    const fail = (e) => { if (!failed) { failed = true; reject(e); } };
    const started = asm.call('assemblerStart', { bands: prep.bands, width, height, planes: prep.planes })
      .then((r) => { peak.whole = Math.max(peak.whole, r.memoryBytes || 0); });
    started.catch(fail);
    const received = bands.map(() => false);
    const adds = [];
    const part = bands.map(() => 0);
    let sent = 0;
    let done = 0;
    const report = () => onProgress(start + span * part.reduce((a, b) => a + b, 0) / bands.length, `${name}: ${done} of ${bands.length} bands`);
    const finish = () => Promise.all([started, ...adds])
      .then(() => asm.call('assemblerFinish'))
      .then((r) => { peak.whole = Math.max(peak.whole, r.memoryBytes || 0); resolve(r.planes); }, fail);
    const send = () => {
      const first = received.indexOf(false);
      while (!failed && sent < bands.length && sent - done < poolSize && sent <= first + 4 * poolSize) {
        const i = sent;
        const b = bands[i];
        sent += 1;
        const noisy = windowOf(prep.planes, width, b.y0, b.y1);
        const basicWin = basic ? windowOf(basic, width, b.y0, b.y1) : new Float32Array(0);
        // The first stage's matching guide (correlated noise only), cut like the planes.
        const guide = !basic && prep.guide ? windowOf([prep.guide], width, b.y0, b.y1) : new Float32Array(0);
        run('band', { settings, sigma: prep.sigma, range: prep.range, width, height, band: b, spectra: prep.spectra, noisy, basic: basicWin, guide },
          [noisy.buffer, basicWin.buffer, guide.buffer], (f) => { part[i] = f; report(); })
          .then((r) => {
            if (failed) return;
            part[i] = 1;
            done += 1;
            received[i] = true;
            const add = asm.call('assemblerAdd', { index: i, num: r.num, den: r.den }, [r.num.buffer, r.den.buffer]);
            add.catch(fail);
            adds.push(add);
            report();
            if (done === bands.length) finish(); else send();
          }, fail);
      }
    };
    send();
  });

  const promise = (async () => {
    const t0 = performance.now();
    onProgress(0, 'preparing');
    const prep = await run('prepare', { bytes: bytes.slice(), settings, probe });
    const { bands } = prep;
    let planes = prep.planes;
    if (bands.length) {
      const basic = await stage(prep, bands, null, 0.05, 0.45, 'basic estimate');
      planes = await stage(prep, bands, basic, 0.5, 0.45, 'final estimate');
    }
    if (asmWorker) asmWorker.stop();
    return end(run, prep, planes, bands, peak, t0);
  })().catch((e) => {
    // One failed job fails the run: its other jobs stop instead of running on for nothing.
    for (const t of jobs) t.stop();
    if (asmWorker) asmWorker.stop();
    throw e;
  });
  const stop = () => {
    stopped = true;
    for (const t of jobs) t.stop();
    if (asmWorker) asmWorker.stop();
  };
  return { promise, stop };
}
