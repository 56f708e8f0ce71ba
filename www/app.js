// The page: loads an image (drop, picker, paste, samples), keeps 2 to 4 settings side by side,
// exports results, settings and metrics. All computation runs in workers (tasks.js).
import { call } from './tasks.js';
import { view, onViewChange, applyTo, fit, pixelForPixel, zoomAt, setImageSize } from './view.js';
import { Pane, paramColumns, sigmaInGreyLevels } from './panes.js';
import { runBatch, stopBatch } from './batch.js';
import { showNoise, hideNoise } from './noiseview.js';
import { wireSweep } from './sweep.js';
import { lowestError } from './verdict.js';

const STORE = 'patchgraph.settings.v1';
const names = ['A', 'B', 'C', 'D'];
const $ = (id) => document.getElementById(id);

const app = {
  // {name, file, fileInfo, unit, bytes, info}: `file` is the whole file as opened, never changed;
  // `bytes` and `info` are the image shown (for a stack, its own one-image file); workers get copies.
  source: null,
  reference: null,
  panes: [],
  defaults: null,

  download(name, blob) {
    const a = document.createElement('a');
    a.href = URL.createObjectURL(blob);
    a.download = name;
    document.body.appendChild(a);
    a.click();
    a.remove();
    setTimeout(() => URL.revokeObjectURL(a.href), 10000);
  },

  remember() {
    try { localStorage.setItem(STORE, JSON.stringify(this.panes.map((p) => p.settings))); } catch { /* storage off */ }
  },

  addPane(settings) {
    if (this.panes.length >= names.length) return;
    const used = new Set(this.panes.map((p) => p.name));
    const name = names.find((n) => !used.has(n));
    const pane = new Pane($('board'), name, settings || structuredClone(this.defaults), this);
    this.panes.push(pane);
    pane.paint();
    this.updateButtons();
    this.remember();
  },

  removePane(pane) {
    if (this.panes.length <= 1) return;
    if (pane.result && !pane.saved && !confirm(`Setting ${pane.name} has a result that was not saved. Remove it?`)) return;
    pane.stop();
    pane.el.remove();
    this.panes = this.panes.filter((p) => p !== pane);
    this.updateButtons();
    this.remember();
  },

  updateButtons() {
    $('add-pane').disabled = this.panes.length >= names.length;
    const sel = $('batch-pane');
    const keep = sel.value;
    sel.replaceChildren(...this.panes.map((p) => new Option(`Setting ${p.name}`, p.name)));
    if (this.panes.some((p) => p.name === keep)) sel.value = keep;
    for (const p of this.panes) { p.q('.remove').disabled = this.panes.length <= 1; p.listOthers(this.panes); }
  },
};

function describe(info, fileInfo = info) {
  const kind = { 1: 'grey', 2: 'grey + alpha', 3: 'RGB', 4: 'RGBA' }[info.channels];
  const shrunk = info.viewFactor > 1 ? `; shown at 1/${info.viewFactor} size, saved results are full size` : '';
  const many = fileInfo.units > 1 ? `, ${fileInfo.units} images (pages or channels)` : '';
  const blank = fileInfo.blankPixels ? `, ${fileInfo.blankPixels} blank pixels (left as they are)` : '';
  // Sigma in the file's own units: float data are worked on as a scaled copy. The noise fit's,
  // once it has arrived (see takeFitSigma), else the quick estimate made on opening.
  const sigma = (info.fitSigma ?? info.sigma) * info.scale;
  const digits = sigma >= 1 ? 2 : Math.min(6, 2 - Math.floor(Math.log10(sigma || 1)));
  return `${info.width} × ${info.height}, ${kind}, ${info.sample} ${fileInfo.format}${many}${blank}, ` +
    `estimated sigma ${sigma.toFixed(digits)}${shrunk}`;
}

// The slice control: which image of a stack (or band of a multi-channel file) every pane shows.
function setupSlices(fileInfo) {
  const many = fileInfo.units > 1;
  $('slice-bar').hidden = !many;
  document.body.toggleAttribute('data-stack', fileInfo.pages > 1);
  $('slice').max = String(fileInfo.units);
  $('slice').value = '1';
  $('slice-label').textContent = many ? fileInfo.unitLabels[0] : '';
}

async function showUnit(k) {
  const src = app.source;
  if (!src || k === src.unit) return;
  $('slice-label').textContent = `${src.fileInfo.unitLabels[k]} (opening…)`;
  try {
    const { file: bytes } = await call('unitFile', { bytes: src.file.slice(), unit: k });
    const info = await call('open', { bytes: bytes.slice() });
    if (app.source !== src) return;
    Object.assign(src, { bytes, info, unit: k });
    $('slice-label').textContent = src.fileInfo.unitLabels[k];
    $('source-info').textContent = `${src.name}: ${describe(info, src.fileInfo)}`;
    for (const p of app.panes) p.showUnit(k);
    refreshNoise(src, bytes);
  } catch (e) {
    $('source-error').textContent = `${src.name}, ${src.fileInfo.unitLabels[k]}: ${e.message}`;
  }
}

// The noise fit follows in the background; the image is usable before it arrives.
function refreshNoise(src, bytes) {
  hideNoise($('noise-fit'));
  call('noise', { bytes: bytes.slice() })
    .then((n) => { if (app.source === src && src.bytes === bytes) { showNoise($('noise-fit'), n); takeFitSigma(src, n); } })
    .catch((e) => { hideNoise($('noise-fit')); console.warn(`noise fit: ${e.message}`); });
}

// The sigma a run with the noise fitted uses replaces the quick opening estimate (for grainy
// noise that reads only the fine grain) in the image line and in the sigma boxes of settings that
// fit the noise and have not run yet, where it is in grey levels.
function takeFitSigma(src, n) {
  if (!sigmaInGreyLevels(n.channels) || !Number.isFinite(n.sigma)) return;
  src.info.fitSigma = n.sigma;
  $('source-info').textContent = `${src.name}: ${describe(src.info, src.fileInfo)}`;
  for (const p of app.panes) if (p.settings.noise === 'auto' && !p.result) p.showEstimate(n.sigma * src.info.scale);
}

async function openSource(name, bytes, fromSample = false) {
  if (!fromSample) $('sample').value = '';
  $('source-error').textContent = '';
  $('source-info').textContent = `Opening ${name}…`;
  try {
    const fileInfo = await call('open', { bytes: bytes.slice() });
    let [shown, info] = [bytes, fileInfo];
    if (fileInfo.units > 1) {
      shown = (await call('unitFile', { bytes: bytes.slice(), unit: 0 })).file;
      info = await call('open', { bytes: shown.slice() });
    }
    const hadOne = Boolean(app.source);
    // Runs on the image being replaced stop: their results would belong to no image shown (and
    // saving must never take one for the new image's).
    for (const p of app.panes) p.stop();
    app.source = { name, file: bytes, fileInfo, unit: 0, bytes: shown, info };
    $('source-info').textContent = `${name}: ${describe(info, fileInfo)}`;
    setupSlices(fileInfo);
    setImageSize(info.width, info.height);
    for (const p of app.panes) { p.clearResults(); p.showEstimate(info.sigma * info.scale); p.showMetrics(); p.clearOverlay(); p.paint(); }
    fit(app.panes[0].viewport);
    refreshNoise(app.source, shown);
    if (hadOne && app.reference) dropReference('Reference set aside: the image changed. Load its clean reference to see PSNR and SSIM.');
  } catch (e) {
    $('source-info').textContent = app.source ? `${app.source.name}: ${describe(app.source.info, app.source.fileInfo)}` : '';
    $('source-error').textContent = `${name}: ${e.message}`;
  }
}

// Metrics against a reference that is no longer used disappear with it.
function dropReference(why) {
  app.reference = null;
  $('reference-info').textContent = why;
  for (const p of app.panes) {
    for (const r of p.results.values()) r.quality = null;
    p.showMetrics();
  }
}

async function openReference(name, bytes) {
  try {
    const info = await call('open', { bytes: bytes.slice() });
    if (app.source && (info.width !== app.source.info.width || info.height !== app.source.info.height)) {
      throw new Error(`it is ${info.width} × ${info.height}, the image is ${app.source.info.width} × ${app.source.info.height}`);
    }
    app.reference = { name, bytes };
    $('reference-info').textContent = `Reference: ${name}`;
    for (const p of app.panes) if (p.result) { p.result.quality = null; await p.measure(); }
  } catch (e) {
    dropReference(`Reference not used: ${name}: ${e.message}`);
  }
}

async function fileBytes(file) { return new Uint8Array(await file.arrayBuffer()); }

// Samples come from the page's own folder, or inlined in the one-file page (no fetch from file://).
async function sampleBytes(file) {
  const inlined = globalThis.patchgraphSamples && globalThis.patchgraphSamples[file];
  if (inlined) return Uint8Array.from(atob(inlined), (c) => c.charCodeAt(0));
  return new Uint8Array(await (await fetch(`samples/${file}`)).arrayBuffer());
}

async function loadSample(which) {
  const get = (kind) => sampleBytes(`${which}-${kind}.png`);
  await openSource(`${which}-noisy.png`, await get('noisy'), true);
  await openReference(`${which}-clean.png`, await get('clean'));
}

function wireInput() {
  $('file').addEventListener('change', async (e) => {
    const f = e.target.files[0];
    e.target.value = '';
    if (f) await openSource(f.name, await fileBytes(f));
  });
  $('reference').addEventListener('change', async (e) => {
    const f = e.target.files[0];
    e.target.value = '';
    if (f) await openReference(f.name, await fileBytes(f));
  });
  $('sample').addEventListener('change', (e) => { if (e.target.value) loadSample(e.target.value); });
  $('slice').addEventListener('change', (e) => showUnit(Number(e.target.value) - 1));
  document.addEventListener('dragover', (e) => { e.preventDefault(); document.body.classList.add('dragging'); });
  document.addEventListener('dragleave', (e) => { if (!e.relatedTarget) document.body.classList.remove('dragging'); });
  document.addEventListener('drop', async (e) => {
    e.preventDefault();
    document.body.classList.remove('dragging');
    const files = e.dataTransfer ? [...e.dataTransfer.files] : [];
    // One file opens for comparison; several go to the batch queue.
    if (files.length === 1) await openSource(files[0].name, await fileBytes(files[0]));
    else if (files.length > 1) queueBatch(files);
  });
  document.addEventListener('paste', async (e) => {
    const f = e.clipboardData && e.clipboardData.files[0];
    if (f) await openSource(f.name || 'pasted image', await fileBytes(f));
  });
}

let batchFiles = [];
function queueBatch(files) {
  batchFiles = files;
  $('batch-summary').textContent = `${files.length} files ready`;
  $('batch-start').disabled = !files.length;
}

function wireBatch() {
  for (const id of ['batch-files', 'batch-folder']) {
    $(id).addEventListener('change', (e) => {
      queueBatch([...e.target.files].filter((f) => /\.(png|jpe?g|tiff?|bmp|fits?|fts)$/i.test(f.name) || id === 'batch-files'));
      e.target.value = '';
    });
  }
  $('batch-start').addEventListener('click', () => {
    const pane = app.panes.find((p) => p.name === $('batch-pane').value) || app.panes[0];
    runBatch(batchFiles, pane, (n, b) => app.download(n, b));
  });
  $('batch-stop').addEventListener('click', stopBatch);
}

// One table of every setting's parameters and metrics: shown under the board, and the CSV.
function tableRows() {
  const rows = app.panes.map((p) => p.metricsRow()).filter(Boolean);
  const cols = ['setting', 'method', 'noise', 'noise_model', 'sigma', 'sigma_estimated', ...paramColumns().map((c) => c.name),
    'slices_joined', 'residual_std_over_sigma', 'residual_lag1_correlation', 'residual_edge_correlation', 'estimated_psnr', 'estimated_gain_db', 'estimated_mse', 'psnr', 'ssim', 'seconds'];
  const cell = (v) => (v === null || v === undefined ? '' : String(v));
  const image = app.source ? app.source.name.replace(/[",\n]/g, ' ') : '';
  return [['image', ...cols], ...rows.map((r) => [image, ...cols.map((c) => cell(r[c]))])];
}

function csv() {
  return `${tableRows().map((r) => r.join(',')).join('\n')}\n`;
}

app.estimating = () => $('estimate-errors').checked;

// With two or more results, all estimated, the one of lowest estimated error is marked
// (lowestError). The error, not the PSNR, is compared: differences between settings hold even
// where the noise level is estimated and the PSNR itself is not given.
function markBest() {
  const done = app.panes.map((p) => [p, p.metricsRow()]).filter(([, m]) => m);
  const at = lowestError(done.map(([, m]) => m.estimated_mse));
  const best = at >= 0 ? done[at][0] : null;
  for (const p of app.panes) p.q('.best-note').hidden = p !== best;
}

app.refreshTable = () => {
  markBest();
  const rows = tableRows();
  const table = $('summary-table');
  table.hidden = rows.length < 2;
  table.replaceChildren(...rows.map((r, i) => {
    const tr = document.createElement('tr');
    tr.append(...r.map((v) => { const c = document.createElement(i ? 'td' : 'th'); c.textContent = v; return c; }));
    return tr;
  }));
};

function wireToolbar() {
  const vp = () => app.panes[0].viewport;
  const centre = () => { const r = vp().getBoundingClientRect(); return [r.width / 2, r.height / 2]; };
  $('zoom-in').addEventListener('click', () => zoomAt(1.25, ...centre()));
  $('zoom-out').addEventListener('click', () => zoomAt(0.8, ...centre()));
  $('zoom-1').addEventListener('click', () => pixelForPixel(vp()));
  $('zoom-fit').addEventListener('click', () => fit(vp()));
  $('add-pane').addEventListener('click', () => app.addPane());
  $('run-all').addEventListener('click', () => app.panes.forEach((p) => p.start()));
  $('save-csv').addEventListener('click', () => app.download('patchgraph-metrics.csv', new Blob([csv()], { type: 'text/csv' })));
  onViewChange(() => {
    for (const p of app.panes) { applyTo([p.canvas, p.overlay]); p.placeDivider(); }
    $('zoom-level').textContent = `${Math.round(view.scale * 100)} %`;
  });
  window.addEventListener('beforeunload', (e) => {
    if (app.panes.some((p) => p.result && !p.saved)) { e.preventDefault(); e.returnValue = ''; }
  });
}

async function main() {
  wireInput();
  wireToolbar();
  wireBatch();
  wireSweep(app);
  const started = await call('defaults');
  app.defaults = started.settings;
  app.fields = started.fields;
  app.choices = started.choices;
  app.methods = started.methods;
  document.body.dataset.wasm = started.build;
  let stored;
  try { stored = JSON.parse(localStorage.getItem(STORE) || 'null'); } catch { stored = null; }
  const second = structuredClone(app.defaults);
  second.method = 'pixel-graph';
  const start = Array.isArray(stored) && stored.length ? stored.slice(0, 4) : [app.defaults, second];
  for (const s of start) app.addPane({ ...structuredClone(app.defaults), ...s });
  $('sample').value = 'cells';
  await loadSample('cells');
  document.body.dataset.ready = 'yes';
}

main().catch((e) => { $('source-error').textContent = `The page could not start: ${e.message}`; });
