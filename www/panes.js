// One pane: a setting of its own, its run (progress, stop), its views and its metrics.
import { call, Stopped } from './tasks.js';
import { runImage, runWholeFile } from './wholefile.js';
import { splitEstimate } from './stitch.js';
import { view, applyTo, attach } from './view.js';
import { split, difference, DIFFERENCE_GAIN } from './compare.js';
import { verdict, fmt } from './verdict.js';
import { getKey, setKey } from './keys.js';

// The settings the page shows, by form field name: the method list, then every setting the
// core's tables (settingFields, settingChoices) mark as shown on the page (`page.shown`), named by
// its settings key, choices first, in the tables' order. Label, limits, options, help, method,
// when it shows (`page.only`, a class the style hides otherwise) and another setting the same box
// also sets (`page.also`) come from the tables, so a setting joins the page by one mark in the
// core. Built once, from the core's first answer (pageFields).
let fields = null;

function pageFields(tables) {
  if (fields) return fields;
  fields = { method: { get: (s) => s.method, set: (s, v) => { s.method = v; } } };
  const entry = (info, numeric) => ({
    info,
    only: info.page.only,
    get: (s) => getKey(s, info.key),
    // Numbers as numbers; a choice's value as the text settings files use.
    set: (s, v) => setKey(s, info.key, numeric ? +v : v, info.page.also),
    numeric,
  });
  for (const c of tables.choices.filter((x) => x.page.shown)) fields[c.key] = entry(c, false);
  for (const f of tables.fields.filter((x) => x.page.shown)) fields[f.key] = entry(f, true);
  return fields;
}

// The parameter columns of the board's table and its CSV: every method's own form field, named by
// the last part of its settings path, in form order. A method's settings live under its name
// ('patch_graph.threshold' belongs to 'patch-graph'), so a field is empty for the other method.
export function paramColumns() {
  return Object.entries(fields || {})
    .filter(([name]) => name.includes('.'))
    .map(([name, fld]) => {
      const [group, last] = name.split('.');
      return { name: last, method: group.replace('_', '-'), get: fld.get };
    });
}

// One fieldset per method (the core's table of methods), holding the fields the core's tables
// give to that method, in `fields` order; marked data-for-method so the pane shows only its own
// method's (Pane.showMethod).
function methodFieldsets(form, methods) {
  for (const m of methods) {
    const set = document.createElement('fieldset');
    set.dataset.forMethod = m.name;
    const legend = document.createElement('legend');
    legend.textContent = m.label;
    set.append(legend);
    for (const [name, fld] of Object.entries(fields)) {
      if (!fld.info || fld.info.method !== m.name) continue;
      const label = document.createElement('label');
      if (fld.only) label.classList.add(fld.only);
      const input = document.createElement(fld.numeric ? 'input' : 'select');
      if (fld.numeric) input.type = 'number';
      input.name = name;
      label.append(input);
      set.append(label);
    }
    form.append(set);
  }
}

// The method list, each numeric field's label, limits and help and each choice's label, options
// and help, from the core's tables; hover help on every field, and the same lines listed in the
// form's "What these settings do".
function addHelp(form, tables, methods) {
  pageFields(tables);
  methodFieldsets(form, methods);
  const list = form.querySelector('.param-help dl');
  form.elements.method.replaceChildren(...methods.map((m) => new Option(m.label, m.name)));
  fields.method.help = methods.map((m) => `${m.label}: ${m.help}`).join(' ');
  for (const [name, fld] of Object.entries(fields)) {
    const input = form.elements[name];
    if (!input) throw new Error(`the page's form has no place for the setting ${name}`);
    const label = input.closest('label');
    const info = fld.info;
    if (info) label.prepend(`${info.label} `);
    if (info && fld.numeric) Object.assign(input, { min: info.zero_means ? 0 : info.min, max: info.max, step: info.step });
    if (info && !fld.numeric) input.replaceChildren(...info.options.map(([value, text]) => new Option(text, value)));
    const help = info ? info.help : fld.help;
    label.title = help;
    const dt = document.createElement('dt');
    dt.textContent = label.firstChild.textContent.trim();
    const own = label.closest('[data-for-method]');
    if (own) dt.dataset.forMethod = own.dataset.forMethod;
    // A field shown only in some cases has its help shown only then.
    if (fld.only) dt.classList.add(fld.only);
    const dd = document.createElement('dd');
    dd.textContent = help;
    dd.className = dt.className;
    if (own) dd.dataset.forMethod = own.dataset.forMethod;
    list.append(dt, dd);
  }
}

// Above this share of pixels flagged in the removed-detail map the verdict names it (a residual
// of pure noise flags under 2% in the map's own test; rule of thumb of ours).
const DETAIL_SHARE = 0.05;

// Progress in plain words, with the time left once it can be told (after 3 s and 5%).
function progressLine(bar, stage) {
  const started = performance.now();
  // The methods' own last word is "done", but the result still has to be put together.
  const words = { 'filtering groups': 'cleaning groups of similar patches', preparing: 'measuring the noise', done: 'finishing' };
  return (f, s) => {
    bar.value = f;
    const elapsed = (performance.now() - started) / 1000;
    const left = f > 0.05 && elapsed > 3 ? elapsed * (1 - f) / f : null;
    const when = left === null ? '' : left < 60 ? `, about ${Math.ceil(left)} s left` : `, about ${Math.ceil(left / 60)} min left`;
    stage.textContent = `${s.replace(/filtering groups|preparing|done$/g, (m) => words[m])}${when}`;
  };
}

// The error estimate in words: the number with its spread and gain, and what it rests on.
function estimateText(e) {
  if (!e) return 'not estimated (tick "Estimate errors" above the board and run)';
  if (!e.applies) return `not given: ${e.note}`;
  const level = e.level_estimated && e.per_sigma_percent_db !== null
    ? ` With the estimated sigma: if it is 1% too high, this is ${fmt(Math.abs(e.per_sigma_percent_db))} dB too high; comparisons between settings hold better.` : '';
  const note = e.note ? ` Note: ${e.note}` : '';
  if (e.psnr === null || e.psnr === undefined) return `no PSNR.${note}`;
  return `${fmt(e.psnr)} dB ± ${fmt(e.psnr_spread)}, ${e.gain_db >= 0 ? '+' : ''}${fmt(e.gain_db)} dB over the input.${level}${note}`;
}

const mean = (a) => a.reduce((x, y) => x + y, 0) / a.length;

// What sigma is measured in when the noise was evened out before the method ran (the report's
// channels say how): photon noise and a measured brightness curve both map the fitted noise to
// one unit; channels merely scaled to one level stay in grey levels.
// Whether a run's sigma is in grey levels, so that a sigma given by hand means the same: not for
// photon or brightness-curve noise, which are fitted only without one (their sigma is after
// evening the noise out).
export const sigmaInGreyLevels = (channels) => !channels.some((c) => c.photon || c.curve_used);

function stabilisedUnit(channels, greyUnit) {
  if (channels.some((c) => c.photon)) return 'after evening out photon noise (1 = the fitted photon and read noise)';
  if (channels.some((c) => c.curve_used)) return 'after evening out the noise over brightness (1 = the measured curve)';
  return `${greyUnit}, each colour channel first scaled to one noise level`;
}

export class Pane {
  constructor(board, name, settings, app) {
    this.app = app;
    this.name = name;
    this.settings = settings;
    this.result = null; // the result for the image shown
    this.results = new Map(); // image number -> result, for files of several images
    this.saved = true;
    this.run = null;
    this.viewName = 'result';
    const el = document.getElementById('pane-template').content.firstElementChild.cloneNode(true);
    this.el = el;
    const q = (s) => el.querySelector(s);
    this.q = q;
    q('.pane-title').textContent = `Setting ${name}`;
    el.setAttribute('aria-label', `Setting ${name}`);
    for (const r of el.querySelectorAll('.views input[type=radio]')) r.name = `view-${name}`;
    this.canvas = q('.picture');
    this.overlay = q('.overlay');
    this.viewport = q('.viewport');
    addHelp(q('.controls'), { fields: app.fields, choices: app.choices }, app.methods);
    this.writeForm();
    q('.controls').addEventListener('input', () => this.readForm());
    q('.controls').addEventListener('submit', (e) => e.preventDefault());
    q('.run').addEventListener('click', () => this.start());
    q('.stop').addEventListener('click', () => this.stop());
    q('.views').addEventListener('change', (e) => {
      if (e.target.type === 'radio') this.show(e.target.value);
      if (e.target.classList.contains('compare-with')) this.paint();
    });
    q('.save-png').addEventListener('click', () => this.save());
    q('.save-json').addEventListener('click', () => this.app.download(`patchgraph-setting-${name}.json`,
      new Blob([JSON.stringify(this.settings, null, 2)], { type: 'application/json' })));
    q('.load-json').addEventListener('change', (e) => this.loadSettings(e.target));
    q('.remove').addEventListener('click', () => this.app.removePane(this));
    attach(this.viewport, (x, y) => { if (q('.show-group').checked) this.showGroup(x, y); });
    q('.split-at').addEventListener('input', () => this.paint());
    this.wireDivider(q('.divider'));
    q('.show-group').addEventListener('change', (e) => { if (!e.target.checked) this.clearOverlay(); });
    // Keyboard: X flips between this result and the other setting's.
    this.viewport.addEventListener('keydown', (e) => {
      if (e.key === 'x' || e.key === 'X') this.show(this.viewName === 'other' ? 'result' : 'other');
    });
    // Keyboard: Enter on the view shows the group at the view's centre.
    this.viewport.addEventListener('keydown', (e) => {
      if (e.key !== 'Enter' || !q('.show-group').checked) return;
      const r = this.viewport.getBoundingClientRect();
      this.showGroup(Math.floor((r.width / 2 - view.x) / view.scale), Math.floor((r.height / 2 - view.y) / view.scale));
    });
    board.appendChild(el);
  }

  writeForm() {
    const f = this.q('.controls');
    for (const [name, fld] of Object.entries(fields)) f.elements[name].value = fld.get(this.settings);
    const auto = this.settings.sigma === 'auto';
    f.elements['sigma-auto'].checked = auto;
    f.elements.sigma.disabled = auto;
    if (!auto) f.elements.sigma.value = this.settings.sigma;
    this.showMethod();
  }

  // The pane's method's own parts (marked data-for-method in the page: its fieldset, views,
  // help lines) show; every other method's hide. Nothing here names a method.
  showMethod() {
    this.el.dataset.method = this.settings.method;
    this.el.dataset.graph = this.settings.pixel_graph.graph;
    for (const el of this.el.querySelectorAll('[data-for-method]')) el.hidden = el.dataset.forMethod !== this.settings.method;
  }

  // With "Estimate sigma" on, the sigma box shows the image's estimate, or the sigma the last run
  // used (in the file's units), so unticking it starts from a sensible value.
  showEstimate(sigma) {
    const box = this.q('.controls').elements.sigma;
    if (this.settings.sigma === 'auto' && Number.isFinite(sigma)) box.value = Number(sigma.toPrecision(4));
  }

  readForm() {
    const f = this.q('.controls');
    for (const [name, fld] of Object.entries(fields)) fld.set(this.settings, f.elements[name].value);
    const auto = f.elements['sigma-auto'].checked;
    f.elements.sigma.disabled = auto;
    this.settings.sigma = auto ? 'auto' : Number(f.elements.sigma.value);
    this.showMethod();
    this.app.remember();
    this.markStale();
  }

  // A result shows what its settings made: after any change it is marked out of date.
  isStale() {
    return Boolean(this.result) && JSON.stringify(this.result.settings) !== JSON.stringify(this.settings);
  }

  markStale() {
    const stale = this.isStale();
    this.el.classList.toggle('stale', stale);
    this.q('.stale-note').hidden = !stale;
    this.q('.save-png').textContent = stale ? 'Save result (runs the new settings first)' : 'Save result';
  }

  async loadSettings(input) {
    const file = input.files[0];
    input.value = '';
    if (!file) return;
    try {
      this.settings = await call('check', { settings: JSON.parse(await file.text()) });
      this.writeForm();
      this.app.remember();
      this.markStale();
      this.error('');
    } catch (e) {
      this.error(`${file.name} was not loaded: it is not a Patchgraph settings file (${e.message})`);
    }
  }

  error(text) { this.q('.error').textContent = text; }

  // While a run, its error estimate or a save is under way, Run and Save wait (a click then
  // would be ignored); Stop ends it.
  busy(on) {
    this.q('.run').disabled = on;
    this.q('.stop').disabled = !on;
    this.q('.save-png').disabled = on || !this.results.size;
  }

  async start() {
    const src = this.app.source;
    if (!src || this.run) return;
    this.error('');
    this.busy(true);
    const bar = this.q('.bar');
    const stage = this.q('.stage');
    bar.value = 0;
    stage.textContent = 'starting';
    const show = progressLine(bar, stage);
    // The result belongs to the settings it started with, whatever is edited while it runs.
    const made = structuredClone(this.settings);
    const settings = made;
    const { file, unit } = src;
    const estimate = this.app.estimating();
    const { pages, units } = src.fileInfo;
    // The file itself only where it may run as a volume (its other pages are then read).
    const place = { file: pages > 1 ? src.file.slice() : null, unit, pages, units };
    this.run = runImage(src.bytes.slice(), settings, show, estimate, place);
    try {
      const r = await this.run.promise;
      // Another image was opened meanwhile (openSource stops runs; this guards the last moment).
      if (this.app.source !== src || src.file !== file) throw new Stopped('stopped');
      r.settings = made;
      r.quality = null;
      this.results.set(unit, r);
      // The slice control may have moved on while this ran: the result waits for its image.
      if (src.unit !== unit) {
        r.methodPlanes = null;
        stage.textContent = `done for image ${unit + 1} in ${fmt(r.seconds)} s; it shows when that image is chosen`;
        bar.value = 1;
        return;
      }
      this.result = r;
      this.saved = false;
      // The sigma box takes the sigma this run used: unticking "Estimate sigma" then starts from
      // this run (a sigma given with noise fitted keeps the fitted grain and channel scaling).
      if (sigmaInGreyLevels(r.report.noise.channels)) this.showEstimate(this.fileSigma(r));
      const mib = (b) => `${Math.round(b / 1048576)} MiB`;
      const peakBytes = r.peakWorkerBytes || r.memoryBytes;
      const workers = r.workers || 1;
      // For benchmarks and tests: the run's figures on the pane itself.
      Object.assign(this.el.dataset, { seconds: r.seconds, workers, peakBytes, bandBytes: r.bandWorkerBytes || '',
        wholeBytes: r.wholeImageWorkerBytes || r.memoryBytes || '' });
      stage.textContent = `done in ${fmt(r.seconds)} s on ${workers} worker${workers > 1 ? 's' : ''}` +
        (peakBytes ? `, at most ${mib(peakBytes)} each` : '');
      bar.value = 1;
      this.markStale();
      this.paint();
      // Views of other settings that compare with this one change too.
      for (const p of this.app.panes) if (p !== this) p.paint();
      await this.measure();
      if (r.methodPlanes) await this.estimate(r, src.bytes, settings, bar, stage);
    } catch (e) {
      stage.textContent = e instanceof Stopped ? 'stopped' : 'failed';
      if (!(e instanceof Stopped)) this.error(e.message);
      bar.value = 0;
    } finally {
      this.run = null;
      this.busy(false);
    }
  }

  stop() { if (this.run) this.run.stop(); }

  // The error estimate's pass after a patch-graph result is shown: the result stays whatever
  // happens to the estimate (stopped or failed).
  async estimate(r, bytes, settings, bar, stage) {
    const done = stage.textContent;
    const planes = r.methodPlanes;
    r.methodPlanes = null;
    const show = progressLine(bar, stage);
    this.run = splitEstimate(bytes.slice(), settings, planes, (f, s) => show(f, `estimating the error: ${s}`));
    const t0 = performance.now();
    try {
      r.report.error_estimate = await this.run.promise;
      stage.textContent = `${done}; error estimated in ${fmt((performance.now() - t0) / 1000)} s`;
    } catch (e) {
      stage.textContent = `${done}; error estimate ${e instanceof Stopped ? 'stopped' : 'failed'}`;
      if (!(e instanceof Stopped)) this.error(`error estimate: ${e.message}`);
    }
    bar.value = 1;
    this.showMetrics();
  }

  // PSNR and SSIM against the clean reference, when there is one of the same size.
  async measure() {
    const ref = this.app.reference;
    if (this.result && ref && !this.result.quality) {
      try {
        this.result.quality = await call('compare', { clean: ref.bytes.slice(), test: this.result.file.slice() });
      } catch (e) {
        this.error(`reference: ${e.message}`);
      }
    }
    this.showMetrics();
  }

  metricsRow() {
    const r = this.result;
    if (!r) return null;
    const res = r.report.residual;
    const st = r.settings;
    const est = r.report.error_estimate;
    const round = (v, d) => (v === null || v === undefined || !Number.isFinite(v) ? v : Number(v.toFixed(d)));
    return {
      setting: this.name,
      method: r.report.method,
      noise: st.noise,
      noise_model: r.report.noise.model,
      sigma: round(this.fileSigma(r), 6),
      sigma_estimated: r.report.sigma_was_estimated,
      // The parameters that made the result, so the table and the CSV say what was compared.
      ...Object.fromEntries(paramColumns().map((c) => [c.name, c.method === st.method ? c.get(st) : null])),
      // Stacks: how many neighbouring slices lent their patches (absent for single images).
      slices_joined: r.report.slices_joined ?? null,
      residual_std_over_sigma: round(mean(res.map((x) => x.std_over_sigma)), 4),
      residual_lag1_correlation: round(mean(res.map((x) => x.lag1_autocorrelation)), 4),
      residual_edge_correlation: round(mean(res.map((x) => x.edge_correlation)), 4),
      estimated_psnr: est && est.psnr !== null && est.psnr !== undefined ? round(est.psnr, 3) : null,
      estimated_gain_db: est && est.gain_db !== null && est.gain_db !== undefined ? round(est.gain_db, 3) : null,
      estimated_mse: est && est.applies ? round(est.mse, 6) : null,
      psnr: r.quality ? round(r.quality.psnr, 3) : null,
      ssim: r.quality ? round(r.quality.ssim, 4) : null,
      seconds: round(r.seconds, 3),
    };
  }

  // Sigma in the file's own units (the method works on a scaled copy of float data).
  fileSigma(r) {
    const scale = this.app.source && this.app.source.info.scale ? this.app.source.info.scale : 1;
    return r.report.stabilised ? r.report.sigma_used : r.report.sigma_used * scale;
  }

  sigmaText(m) {
    const r = this.result;
    const info = this.app.source ? this.app.source.info : {};
    const digits = m.sigma >= 1 ? 2 : 5;
    const greyUnit = /float/.test(info.sample || '') ? 'in the file\'s own units' : `grey levels of the ${(info.sample || '').replace(' unsigned', '')} data`;
    const unit = r.report.stabilised ? stabilisedUnit(r.report.noise.channels, greyUnit) : greyUnit;
    return `${fmt(m.sigma, digits)} ${unit} (${m.sigma_estimated ? 'estimated' : 'given'})`;
  }

  showMetrics() {
    const m = this.metricsRow();
    const dl = this.q('.metrics');
    dl.replaceChildren();
    this.q('.verdict').textContent = '';
    if (!m) { this.app.refreshTable(); return; }
    const q = this.result.quality;
    const rows = [
      ['Noise model', m.noise_model, ''],
      ['Sigma', this.sigmaText(m), 'the noise level the method removed'],
      ['Residual std / sigma', fmt(m.residual_std_over_sigma, 3), 'how much was removed, in units of the noise: near 1 for white noise'],
      ['Residual neighbour correlation', fmt(m.residual_lag1_correlation, 3),
        'grain of what was removed: near 0 for white noise; higher when structure (or grainy noise) was removed'],
      ['Residual–edge correlation', fmt(m.residual_edge_correlation, 3),
        'whether what was removed follows the image\'s edges: near 0 is good; above 0.15 detail went too'],
      ['Estimated PSNR (no reference)', estimateText(this.result.report.error_estimate),
        'the error against the unknown clean image, from one more pass (Stein\'s unbiased risk estimate); it holds for noise independent from pixel to pixel'],
      // From the unrounded values: the table's are rounded to 3 places, and rounding twice shows
      // 34.6146 as 34.62.
      ['PSNR against reference', q ? `${fmt(q.psnr)} dB` : 'no reference', 'higher is better; +1 dB is 21% less squared error'],
      ['SSIM against reference', q ? fmt(q.ssim, 4) : 'no reference', 'structural similarity; 1 is identical'],
    ];
    const joined = this.result.report.slices_joined;
    if (joined !== undefined && joined !== null) {
      rows.splice(2, 0, ['Slices joined', String(joined), 'neighbouring slices of the stack that lent this image their patches (0: it was denoised alone)']);
    }
    for (const [k, v, help] of rows) {
      const dt = document.createElement('dt'); dt.textContent = k;
      const dd = document.createElement('dd'); dd.textContent = v;
      if (help) { const small = document.createElement('small'); small.textContent = help; dd.append(small); }
      dl.append(dt, dd);
    }
    const share = this.result.detailShare;
    this.q('.verdict').textContent = verdict(m, this.result.report) + (share > DETAIL_SHARE
      ? ` In ${fmt(100 * share, 1)}% of the image the removed part follows the result's structure (red in "Removed detail").` : '');
    this.app.refreshTable();
  }

  show(name) {
    this.viewName = name;
    for (const radio of this.el.querySelectorAll('.views input[type=radio]')) radio.checked = radio.value === name;
    this.q('.split-at').hidden = name !== 'split';
    this.paint();
  }

  // The split line on the view: dragged with the pointer (without panning the view) or moved by
  // arrow keys; it and the slider hold one value, the line's place in per cent of the width.
  wireDivider(d) {
    const slider = this.q('.split-at');
    const set = (v) => { slider.value = String(Math.min(100, Math.max(0, v))); this.paint(); };
    const toValue = (clientX) => {
      const r = this.viewport.getBoundingClientRect();
      const f = Number(this.canvas.dataset.factor) || 1;
      return (100 * (clientX - r.left - view.x)) / (view.scale * f * this.canvas.width);
    };
    d.addEventListener('pointerdown', (e) => { e.stopPropagation(); d.setPointerCapture(e.pointerId); d.dataset.dragging = '1'; });
    d.addEventListener('pointermove', (e) => { if (d.dataset.dragging) { e.stopPropagation(); set(toValue(e.clientX)); } });
    const end = (e) => { e.stopPropagation(); delete d.dataset.dragging; };
    d.addEventListener('pointerup', end);
    d.addEventListener('pointercancel', end);
    d.addEventListener('keydown', (e) => {
      const step = { ArrowLeft: -1, ArrowRight: 1, PageDown: -10, PageUp: 10 }[e.key];
      if (step === undefined) return;
      e.preventDefault(); e.stopPropagation();
      set(Number(slider.value) + step);
    });
  }

  // Keeps the divider over the split line (called after every paint and view change).
  placeDivider() {
    const d = this.q('.divider');
    const on = this.viewName === 'split' && !!this.canvas.width;
    d.hidden = !on;
    if (!on) return;
    const value = Number(this.q('.split-at').value);
    const f = Number(this.canvas.dataset.factor) || 1;
    d.style.left = `${view.x + (view.scale * f * this.canvas.width * value) / 100}px`;
    d.setAttribute('aria-valuenow', String(value));
  }

  // The setting chosen in "with", or the first other one.
  other() {
    const name = this.q('.compare-with').value;
    return this.app.panes.find((p) => p !== this && p.name === name) || this.app.panes.find((p) => p !== this);
  }

  // Other settings offered in "with" (called when settings come and go).
  listOthers(panes) {
    const sel = this.q('.compare-with');
    const keep = sel.value;
    const others = panes.filter((p) => p !== this);
    sel.replaceChildren(...others.map((p) => new Option(`Setting ${p.name}`, p.name)));
    if (others.some((p) => p.name === keep)) sel.value = keep;
    // With two settings there is only one to compare with: no need to ask.
    this.q('.compare-with-label').hidden = others.length < 2;
  }

  paint() {
    const src = this.app.source;
    if (!src) return;
    const { viewWidth: width, viewHeight: height, viewFactor } = src.info;
    const r = this.result;
    const o = this.other();
    const mine = r && r.rgba;
    const theirs = o && o.result && o.result.rgba;
    const both = mine && theirs;
    const pick = {
      input: src.info.rgba,
      result: mine,
      residual: r && r.residual,
      detail: r && r.detail,
      cuts: r && r.cuts,
      other: theirs,
      split: both && split(mine, theirs, width, height, (width * Number(this.q('.split-at').value)) / 100),
      difference: both && difference(mine, theirs),
    };
    const rgba = pick[this.viewName] || src.info.rgba;
    const them = o ? `Setting ${o.name}` : 'another setting';
    const needBoth = `Both this setting and ${them} need a result: press Run in each. Showing the input.`;
    const legends = {
      input: 'The input as opened.',
      result: r ? 'The result.' : 'No result yet: press Run. Showing the input.',
      residual: r ? 'Residual = input − result. Mid-grey: nothing removed; lighter or darker: removed. It should look like even grain, with no edges or shapes.'
        : 'No result yet: press Run. Showing the input.',
      detail: r && r.detail ? `Red: where the removed part follows the result's own structure (its local correlation with the result's detail is above 0.4 over 9 × 9 pixels), so detail went with the noise there: ${fmt(100 * r.detailShare, 1)}% of the image.`
        : r ? 'Not drawn for images over 16 megapixels. Showing the input.' : 'No result yet: press Run. Showing the input.',
      cuts: r && r.cuts ? ((r.settings || this.settings).pixel_graph.graph === 'non-local'
        ? 'Cut map of the non-local graph: the share of the 7 × 7 window a pixel is not joined to; darker where it is joined to more (smoothed more).'
        : 'Cut map: white where a pixel\'s graph edges are cut (an intensity edge the filter does not smooth across), black where none are.')
        : 'No cut map: it comes with a pixel-graph run. Showing the input.',
      other: theirs ? `${them}'s result, in this view (X on the view flips back and forth).` : `${them} has no result yet. Showing the input.`,
      split: both ? `Left of the white line: Setting ${this.name}; right: ${them}. Drag the line's handle (or use the slider) to move it.` : needBoth,
      difference: both ? `Difference between Setting ${this.name} and ${them}, ${DIFFERENCE_GAIN} × brighter: black where they agree.` : needBoth,
    };
    this.q('.legend').textContent = legends[this.viewName] || '';
    for (const c of [this.canvas, this.overlay]) {
      if (c.width !== width || c.height !== height) { c.width = width; c.height = height; }
    }
    this.canvas.getContext('2d').putImageData(new ImageData(new Uint8ClampedArray(rgba), width, height), 0, 0);
    for (const c of [this.canvas, this.overlay]) c.dataset.factor = viewFactor;
    applyTo([this.canvas, this.overlay]);
    this.placeDivider();
  }

  clearOverlay() {
    const ctx = this.overlay.getContext('2d');
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.clearRect(0, 0, this.overlay.width, this.overlay.height);
  }

  async showGroup(x, y) {
    const src = this.app.source;
    if (!src) return;
    try {
      const g = await call('group', { bytes: src.bytes.slice(), settings: this.settings, x, y });
      const ctx = this.overlay.getContext('2d');
      this.clearOverlay();
      // The overlay has the view's size; outlines are given in image pixels.
      const f = src.info.viewFactor;
      ctx.setTransform(1 / f, 0, 0, 1 / f, 0, 0);
      ctx.lineWidth = Math.max(1, 1 / view.scale) * f;
      g.positions.forEach(([px, py], i) => {
        ctx.strokeStyle = i === 0 ? '#ffd400' : `rgba(0, 220, 255, ${0.35 + 0.65 * Math.max(0, g.similarity[i])})`;
        ctx.strokeRect(px + 0.5, py + 0.5, g.patch - 1, g.patch - 1);
      });
      this.q('.stage').textContent = `group of ${g.positions.length} patches at (${x}, ${y})`;
    } catch (e) {
      this.error(e.message);
    }
  }

  // The slice control moved: show this setting's result for image k, if it has one.
  showUnit(k) {
    const r = this.results.get(k);
    this.result = r && r.rgba ? r : null;
    this.markStale();
    this.showMetrics();
    this.clearOverlay();
    this.paint();
  }

  // Forgets results (a new file was opened).
  clearResults() {
    this.results = new Map();
    this.result = null;
    this.saved = true;
    this.q('.save-png').disabled = true;
    this.markStale();
  }

  // Saves the whole file in its own format: every image of it, those not yet run with these
  // settings run first (with progress, stoppable).
  async save() {
    const src = this.app.source;
    if (!src || this.run || !this.results.size) return;
    const base = (src.name || 'image').replace(/\.[^.]+$/, '');
    const units = src.fileInfo.units;
    const made = structuredClone(this.settings);
    const settings = made;
    const same = (r) => r && JSON.stringify(r.settings) === JSON.stringify(made);
    const stage = this.q('.stage');
    const bar = this.q('.bar');
    this.error('');
    this.busy(true);
    this.run = runWholeFile(src.file, units, settings, progressLine(bar, stage),
      (k) => (same(this.results.get(k)) ? this.results.get(k) : null),
      (k, r) => {
        r.settings = made;
        // Images not on screen keep only what saving needs.
        this.results.set(k, k === src.unit ? r : { file: r.file, settings: r.settings, report: r.report });
      }, src.fileInfo.pages);
    try {
      const out = await this.run.promise;
      this.app.download(`${base}-denoised-${this.name}.${out.extension}`, new Blob([out.file]));
      this.saved = true;
      // The core picks the format (a JPEG or BMP comes back as PNG, so nothing is lost again): say which.
      const as = `as ${out.extension.toUpperCase()}`;
      stage.textContent = units > 1 ? `saved all ${units} images ${as}` : `saved ${as}`;
      const shown = this.results.get(src.unit);
      if (shown && shown.rgba && this.app.source === src) { this.result = shown; this.markStale(); this.paint(); await this.measure(); }
    } catch (e) {
      stage.textContent = e instanceof Stopped ? 'stopped; nothing was saved' : 'saving failed';
      if (!(e instanceof Stopped)) this.error(e.message);
    } finally {
      this.run = null;
      this.busy(false);
    }
  }
}
