// "Sweep a parameter": Setting A's settings copied into four settings with one parameter at four
// evenly spaced values, then all run, so the estimated errors say which value suits the image.
const $ = (id) => document.getElementById(id);
const SETTINGS = 4;

// The parameters worth sweeping per method, with the form's limits.
const PARAMETERS = {
  'patch-graph': {
    threshold: { label: 'Threshold (× sigma)', min: 0, max: 10, set: (s, v) => { s.patch_graph.threshold = v; }, get: (s) => s.patch_graph.threshold },
    group: { label: 'Group size', min: 1, max: 32, whole: true,
      set: (s, v) => { s.patch_graph.group_size_hard = v; s.patch_graph.group_size_wiener = v; }, get: (s) => s.patch_graph.group_size_hard },
    search: { label: 'Search radius', min: 2, max: 24, whole: true, set: (s, v) => { s.patch_graph.search_radius = v; }, get: (s) => s.patch_graph.search_radius },
  },
  'pixel-graph': {
    strength: { label: 'Strength', min: 0, max: 20, set: (s, v) => { s.pixel_graph.strength = v; }, get: (s) => s.pixel_graph.strength },
    cut: { label: 'Edge cut (× sigma)', min: 0.1, max: 1000, set: (s, v) => { s.pixel_graph.cut_threshold = v; }, get: (s) => s.pixel_graph.cut_threshold },
  },
};

// `values(from, to)`: SETTINGS values from `from` to `to`, rounded to whole numbers where the
// parameter is one (duplicates then dropped).
export function sweepValues(from, to, whole) {
  const v = Array.from({ length: SETTINGS }, (_, i) => from + ((to - from) * i) / (SETTINGS - 1));
  const r = v.map((x) => (whole ? Math.round(x) : Number(x.toPrecision(6))));
  return [...new Set(r)];
}

export function wireSweep(app) {
  const form = $('sweep-form');
  const first = () => app.panes.find((p) => p.name === 'A') || app.panes[0];
  const params = () => PARAMETERS[first().settings.method];
  const fill = () => {
    const sel = $('sweep-param');
    const keep = sel.value;
    sel.replaceChildren(...Object.entries(params()).map(([k, p]) => new Option(p.label, k)));
    if (params()[keep]) sel.value = keep;
    const p = params()[sel.value];
    const now = p.get(first().settings);
    $('sweep-from').value = Math.max(p.min, Number((now * 0.7).toPrecision(3)));
    $('sweep-to').value = Math.min(p.max, Number((now * 1.3).toPrecision(3)));
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
    const values = sweepValues(from, to, p.whole);
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
