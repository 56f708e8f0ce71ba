// "Sweep a parameter": Setting A's settings copied into four settings with one parameter at four
// evenly spaced values (in ratio for the pixel graph's strength), then all run, so the estimated
// errors say which value suits the image.
import { getKey, setKey } from './keys.js';

const $ = (id) => document.getElementById(id);
const SETTINGS = 4;

// SETTINGS values from `from` to `to`, evenly spaced (with `ratio` and both ends above 0, each
// the same multiple of the last, to three digits: 2.52, not 2.51984), rounded to whole numbers
// where the parameter is one (duplicates then dropped).
export function sweepValues(from, to, whole, ratio = false) {
  const geometric = ratio && from > 0 && to > 0;
  const at = (i) => (geometric
    ? from * (to / from) ** (i / (SETTINGS - 1))
    : from + ((to - from) * i) / (SETTINGS - 1));
  const v = Array.from({ length: SETTINGS }, (_, i) => at(i));
  const digits = geometric ? 3 : 6;
  const r = v.map((x) => (whole ? Math.round(x) : Number(x.toPrecision(digits))));
  return [...new Set(r)];
}

export function wireSweep(app) {
  const form = $('sweep-form');
  const first = () => app.panes.find((p) => p.name === 'A') || app.panes[0];
  // The parameters the core's table offers for Setting A's method (`page.sweep`: a span to offer
  // at first, values in ratio), with its label and limits (a step of 1: whole numbers).
  const params = () => Object.fromEntries(app.fields
    .filter((f) => f.page.sweep && f.method === first().settings.method)
    .map((f) => [f.key, {
      label: f.label, min: f.min, max: f.max, whole: f.step === 1, span: f.page.sweep.span, ratio: f.page.sweep.ratio,
      get: (s) => getKey(s, f.key), set: (s, v) => setKey(s, f.key, v, f.page.also),
    }]));
  const fill = () => {
    const sel = $('sweep-param');
    const keep = sel.value;
    sel.replaceChildren(...Object.entries(params()).map(([k, p]) => new Option(p.label, k)));
    if (params()[keep]) sel.value = keep;
    const p = params()[sel.value];
    const now = p.get(first().settings);
    const [from, to] = p.span || [now * 0.7, now * 1.3];
    $('sweep-from').value = Math.max(p.min, Number(from.toPrecision(3)));
    $('sweep-to').value = Math.min(p.max, Number(to.toPrecision(3)));
  };
  $('sweep-open').addEventListener('click', () => {
    form.hidden = !form.hidden;
    $('sweep-open').setAttribute('aria-expanded', String(!form.hidden));
    if (!form.hidden) fill();
  });
  $('sweep-param').addEventListener('change', fill);
  $('sweep-make').addEventListener('click', () => {
    const p = params()[$('sweep-param').value];
    const from = Number($('sweep-from').value);
    const to = Number($('sweep-to').value);
    $('sweep-error').textContent = '';
    if (!Number.isFinite(from) || !Number.isFinite(to) || from < p.min || to > p.max || from > p.max || to < p.min) {
      $('sweep-error').textContent = `${p.label}: from and to must lie between ${p.min} and ${p.max}`;
      return;
    }
    const unsaved = app.panes.filter((q) => q !== first() && q.result && !q.saved);
    if (unsaved.length && !confirm(`Settings ${unsaved.map((q) => q.name).join(', ')} have results that were not saved. Replace them?`)) return;
    const base = structuredClone(first().settings);
    for (const q of app.panes.filter((x) => x !== first())) { q.stop(); q.saved = true; app.removePane(q); }
    const values = sweepValues(from, to, p.whole, p.ratio);
    values.forEach((v, i) => {
      const s = structuredClone(base);
      p.set(s, v);
      if (i === 0) { first().settings = s; first().writeForm(); first().markStale(); } else app.addPane(s);
    });
    app.remember();
    if (!app.estimating()) $('estimate-errors').checked = true;
    for (const q of app.panes) q.start();
  });
}
