// Many files with one setting: a queue with per-file progress and an overall bar, stop, per-file
// errors that do not stop the others, and the results plus a report CSV in one ZIP.
import { call, Stopped } from './tasks.js';
import { runWholeFile } from './wholefile.js';
import { makeZip } from './zip.js';

const $ = (id) => document.getElementById(id);
let current = null;
let stopping = false;

const csvCell = (v) => { const s = v === null || v === undefined ? '' : String(v); return /[",\n]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s; };

export async function runBatch(files, pane, download) {
  if (current || !files.length) return;
  stopping = false;
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
  const settings = JSON.stringify(pane.settings);
  const entries = [];
  const report = [['file', 'result', 'sigma', 'seconds', 'error']];
  const used = new Set();
  for (let i = 0; i < files.length; i += 1) {
    const f = files[i]; const row = rows[i];
    if (stopping) { row.state.textContent = 'not run (stopped)'; report.push([f.name, '', '', '', 'not run: stopped']); continue; }
    row.state.textContent = 'running';
    try {
      const bytes = new Uint8Array(await f.arrayBuffer());
      const onProgress = (fr) => { row.bar.value = fr; overall.value = (i + fr) / files.length; };
      const started = performance.now();
      const { units, pages } = await call('open', { bytes: bytes.slice() });
      // As in a pane: every page and channel, the file saved whole in its own format.
      current = runWholeFile(bytes, units, settings, onProgress, undefined, undefined, pages);
      const r = await current.promise;
      const stem = f.name.replace(/\.[^.]+$/, '');
      let name = `${stem}-denoised.${r.extension}`;
      for (let k = 2; used.has(name); k += 1) name = `${stem}-denoised-${k}.${r.extension}`;
      used.add(name);
      entries.push({ name, bytes: r.file });
      const seconds = (performance.now() - started) / 1000;
      report.push([f.name, name, r.reports[0].sigma_used.toFixed(4), seconds.toFixed(3), '']);
      row.bar.value = 1;
      row.state.textContent = 'done';
    } catch (e) {
      const why = e instanceof Stopped ? 'stopped' : e.message;
      report.push([f.name, '', '', '', why]);
      row.state.textContent = `failed: ${why}`;
      row.bar.value = 0;
    } finally {
      current = null;
    }
    overall.value = (i + 1) / files.length;
  }
  const csv = `${report.map((r) => r.map(csvCell).join(',')).join('\n')}\n`;
  entries.push({ name: 'report.csv', bytes: new TextEncoder().encode(csv) });
  // The setting every file was denoised with, loadable in a pane or with `--settings`.
  entries.push({ name: 'settings.json', bytes: new TextEncoder().encode(JSON.stringify(pane.settings, null, 2)) });
  const ok = report.filter((r) => r[1]).length - 1;
  $('batch-summary').textContent = `${ok} of ${files.length} files denoised with setting ${pane.name}; the ZIP holds the results, report.csv and settings.json.`;
  download(`patchgraph-batch-${pane.name}.zip`, makeZip(entries));
  $('batch-start').disabled = false;
  $('batch-stop').disabled = true;
}

export function stopBatch() {
  stopping = true;
  if (current) current.stop();
}
