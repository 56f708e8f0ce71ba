// Many files with one setting: a queue with per-file progress and an overall bar, stop, per-file
// errors that do not stop the others, and the results plus a report CSV in one ZIP.
import { call, poolSize, Stopped } from './tasks.js';
import { runWholeFile, runPlan } from './wholefile.js';
import { makeZip } from './zip.js';

const $ = (id) => document.getElementById(id);
// The whole-file runs in flight (several at once for a one-worker method).
const running = new Set();
let stopping = false;
let busy = false;

const csvCell = (v) => { const s = v === null || v === undefined ? '' : String(v); return /[",\n]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s; };

export async function runBatch(files, pane, download) {
  if (busy || !files.length) return;
  busy = true;
  stopping = false;
  try {
    await runQueue(files, pane, download);
  } catch (e) {
    // The results could not be packed (e.g. out of memory for the ZIP): say so, and let the user
    // start again; the files themselves were never touched.
    $('batch-summary').textContent = `The batch could not be finished: ${e.message}`;
  } finally {
    $('batch-start').disabled = false;
    $('batch-stop').disabled = true;
    busy = false;
  }
}

async function runQueue(files, pane, download) {
  const list = $('batch-list');
  list.replaceChildren();
  const rows = files.map((f) => {
    const li = document.createElement('li');
    const label = document.createElement('span');
    label.textContent = f.name;
    const bar = document.createElement('progress');
    bar.max = 1; bar.value = 0; bar.setAttribute('aria-label', `Progress of ${f.name}`);
    const state = document.createElement('span');
    state.textContent = 'waiting';
    li.append(label, ' ', bar, ' ', state);
    list.appendChild(li);
    return { bar, state };
  });
  $('batch-start').disabled = true;
  $('batch-stop').disabled = false;
  const overall = $('batch-overall');
  const settings = structuredClone(pane.settings);
  const report = [['file', 'result', 'sigma', 'seconds', 'error']];
  // A method that splits an image into bands uses every worker for one file; one that runs in
  // a single worker takes as many files at once as there are workers (the core's plan says which).
  let lanes = 1;
  try {
    lanes = (await runPlan(settings, 1)).bands ? 1 : poolSize;
  } catch { /* the settings' own error shows on each file below */ }
  const done = new Array(files.length).fill(0);
  const showOverall = () => { overall.value = done.reduce((a, b) => a + b, 0) / files.length; };
  const outcomes = new Array(files.length);
  const one = async (i) => {
    const f = files[i]; const row = rows[i];
    if (stopping) { row.state.textContent = 'not run (stopped)'; outcomes[i] = { error: 'not run: stopped' }; return; }
    row.state.textContent = 'running';
    let job = null;
    try {
      const bytes = new Uint8Array(await f.arrayBuffer());
      const onProgress = (fr) => { row.bar.value = fr; done[i] = fr; showOverall(); };
      const started = performance.now();
      const { units, pages } = await call('open', { bytes: bytes.slice() });
      if (stopping) throw new Stopped('stopped');
      // As in a pane: every page and channel, the file saved whole in its own format.
      job = runWholeFile(bytes, units, settings, onProgress, undefined, undefined, pages);
      running.add(job);
      const r = await job.promise;
      outcomes[i] = { r, seconds: (performance.now() - started) / 1000 };
      row.bar.value = 1;
      row.state.textContent = 'done';
    } catch (e) {
      const why = e instanceof Stopped ? 'stopped' : e.message;
      outcomes[i] = { error: why };
      row.state.textContent = `failed: ${why}`;
      row.bar.value = 0;
    } finally {
      running.delete(job);
    }
    done[i] = 1;
    showOverall();
  };
  let next = 0;
  const lane = async () => { while (next < files.length) { const i = next; next += 1; await one(i); } };
  await Promise.all(Array.from({ length: Math.min(lanes, files.length) }, lane));
  // Names and report rows in the files' order, whichever finished first.
  const entries = [];
  const used = new Set();
  files.forEach((f, i) => {
    const { r, seconds, error } = outcomes[i];
    if (!r) { report.push([f.name, '', '', '', error]); return; }
    const stem = f.name.replace(/\.[^.]+$/, '');
    let name = `${stem}-denoised.${r.extension}`;
    for (let k = 2; used.has(name); k += 1) name = `${stem}-denoised-${k}.${r.extension}`;
    used.add(name);
    entries.push({ name, bytes: r.file });
    report.push([f.name, name, r.reports[0].sigma_used.toFixed(4), seconds.toFixed(3), '']);
  });
  const csv = `${report.map((r) => r.map(csvCell).join(',')).join('\n')}\n`;
  entries.push({ name: 'report.csv', bytes: new TextEncoder().encode(csv) });
  // The setting every file was denoised with, loadable in a pane or with `--settings`.
  entries.push({ name: 'settings.json', bytes: new TextEncoder().encode(JSON.stringify(pane.settings, null, 2)) });
  const ok = report.filter((r) => r[1]).length - 1;
  $('batch-summary').textContent = `${ok} of ${files.length} files denoised with setting ${pane.name}; the ZIP holds the results, report.csv and settings.json.`;
  download(`patchgraph-batch-${pane.name}.zip`, makeZip(entries));
}

export function stopBatch() {
  stopping = true;
  for (const job of running) job.stop();
}
