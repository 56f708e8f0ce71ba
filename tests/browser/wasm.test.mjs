// The wasm module itself, in Node: decode, denoise a small image, errors as exceptions.
import { test } from 'node:test';
import assert from 'node:assert/strict';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { ROOT } from './harness.mjs';
import { greyPng, grainyPng } from './fixtures.mjs';

const pg = await import(join(ROOT, 'www', 'pkg', 'patchgraph.js'));
pg.initSync({ module: readFileSync(join(ROOT, 'www', 'pkg', 'patchgraph_bg.wasm')) });
const sample = readFileSync(join(ROOT, 'sample-images', 'cells-noisy.png'));

test('open reports size, depth and an RGBA preview', () => {
  const info = pg.open(sample, 64);
  assert.equal(info.width, 256);
  assert.equal(info.bitDepth, 8);
  assert.equal(info.rgba.length, 256 * 256 * 4);
});

test('denoise returns a result file (PNG for a PNG input) of the same size and a report', () => {
  const settings = pg.defaultSettings();
  settings.method = 'pixel-graph';
  const calls = [];
  const r = pg.denoise(sample, settings, 64, (f) => calls.push(f));
  assert.equal(pg.open(r.file, 64).width, 256);
  assert.equal(r.extension, 'png');
  assert.ok(calls.length > 0 && calls.every((f) => f >= 0 && f <= 1));
  assert.equal(r.report.method, 'pixel-graph');
});

test('errors arrive as exceptions with the plain message', () => {
  assert.throws(() => pg.open(new Uint8Array(0), 64), /the file is empty/);
  assert.throws(() => pg.open(new TextEncoder().encode('hello'), 64), /not an image/);
  assert.throws(() => pg.checkSettings({ sigma: -3 }), /sigma must be between 0 and 65535, got -3/);
  assert.throws(() => pg.denoise(sample, { bogus: 1 }, 64, () => {}), /not valid/);
  assert.throws(() => pg.denoise(sample, 'patch-graph', 64, () => {}), /not valid/);
});

test('settings cross as objects and are read as a settings file is', () => {
  // Our settings format (README: version-1 files "are still read and mean what they meant"): its Poisson fields are renamed
  // and the version raised; absent fields take their defaults, which the object then carries.
  const v1 = pg.checkSettings({ version: 1, poisson_gain: 3.5, sigma: 12 });
  assert.equal(v1.version, 2);
  assert.equal(v1.gain, 3.5);
  assert.equal(v1.sigma, 12);
  assert.equal(v1.poisson_gain, undefined);
  assert.deepEqual(pg.checkSettings(pg.defaultSettings()), pg.defaultSettings());
});



test('the pixel-graph method refuses images too large for one worker, with the reason', () => {
  // 4001 x 4000 = 16.004 megapixels, just over the page's limit of 16.
  const png = greyPng(4001, 4000);
  assert.equal(pg.open(png, 64).width, 4001);
  assert.throws(() => pg.denoise(png, { method: 'pixel-graph' }, 64, () => {}), /too large for the pixel-graph method in the page/);
});

// What www/stitch.js does, here on one wasm instance: each band of a stage run (in reverse order)
// and its sums fed to the core's BandAssembler; the first stage's bands get their window of the
// matching guide, as stitch.js sends it.
function splitStage(prep, basic, settings) {
  const { width: w, height: h } = prep;
  const own = prep.bands;
  // None for a probe pass that cannot give an estimate.
  if (!own.length) return prep.planes[0];
  const asm = new pg.BandAssembler(prep.bands, w, h, prep.planes);
  for (let i = own.length - 1; i >= 0; i -= 1) {
    const b = own[i];
    const win = (p) => (p ? p.slice(b.y0 * w, b.y1 * w) : new Float32Array(0));
    const r = pg.runBand(settings, prep.sigma, prep.range, w, h, b, prep.spectra, win(prep.planes[0]), win(basic),
      basic ? new Float32Array(0) : win(prep.guide), () => {});
    asm.add(i, r.num, r.den);
  }
  return asm.finish()[0];
}

test('the split run gives the whole-image result: prepare, bands in any order, finish', () => {
  // Invariant: the bands' sums, assembled, equal one 'denoise' call.
  const settings = { method: 'patch-graph' };
  const whole = pg.denoise(sample, settings, 64, () => {});
  const prep = pg.prepareRun(sample, settings, 64, false);
  const { bands } = prep;
  assert.equal(prep.planes.length, 1);
  assert.ok(bands.length >= 3, `${bands.length} bands`);
  const { width: w, height: h } = prep;
  const stage = (p, basic) => splitStage(p, basic, settings);
  // The assembler refuses sums that do not fit their band, and a band given twice.
  const check = new pg.BandAssembler(prep.bands, w, h, prep.planes);
  assert.throws(() => check.add(0, new Float64Array(3), new Float64Array(3)), /do not match its size/);
  const b0 = bands[0];
  const sums0 = pg.runBand(settings, prep.sigma, prep.range, w, h, b0, prep.spectra, prep.planes[0].slice(b0.y0 * w, b0.y1 * w), new Float32Array(0), new Float32Array(0), () => {});
  check.add(0, sums0.num.slice(), sums0.den.slice());
  assert.throws(() => check.add(0, sums0.num, sums0.den), /does not fit its place/);
  const basic = stage(prep, null);
  const final = stage(prep, basic);
  const r = pg.finishRun(sample, settings, prep.fitted, [final], 64);
  assert.ok(Buffer.from(r.file).equals(Buffer.from(whole.file)));
  // Finishing takes the preparing worker's noise model instead of fitting again; one that does
  // not fit the image is refused, not used.
  assert.deepEqual(r.report.noise, whole.report.noise);
  assert.throws(() => pg.finishRun(sample, settings, { ...prep.fitted, estimates: [] }, [final], 64),
    /does not belong to this image/);
  assert.throws(() => pg.runBand(settings, prep.sigma, prep.range, w, h, bands[1], prep.spectra, new Float32Array(10), new Float32Array(0), new Float32Array(0), () => {}),
    /do not match the image size/);
  // The error estimate split the same way (the probe's input prepared, its bands run, the estimate
  // from both passes' planes) equals the one-call estimate: invariant, same arithmetic.
  const oneCall = pg.denoise(sample, settings, 64, () => {}, true).report.error_estimate;
  const probePrep = pg.prepareRun(sample, settings, 64, true);
  const probed = stage(probePrep, stage(probePrep, null));
  const split = pg.estimateError(sample, probePrep.fitted, [final], [probed], 64);
  assert.deepEqual(split, oneCall);
  // The sample's dark background is cut off at 0 over most of the image: the estimate says so.
  assert.ok(!split.applies && /cut off at black/.test(split.note), JSON.stringify(split));
});

test('grainy noise: the split run gets the matching guide and still gives the whole-image result', () => {
  // The first stage matches on a whitened plane the core prepares once for the whole image; the
  // bands get their rows of it. Invariant: bands and assembler give the one-call result.
  const png = grainyPng(160);
  const settings = { method: 'patch-graph' };
  const whole = pg.denoise(png, settings, 64, () => {});
  assert.match(whole.report.noise.model, /correlated/);
  const prep = pg.prepareRun(png, settings, 64, false);
  assert.ok(prep.guide instanceof Float32Array && prep.guide.length === prep.width * prep.height);
  assert.ok(prep.bands.length >= 2);
  const final = splitStage(prep, splitStage(prep, null, settings), settings);
  const r = pg.finishRun(png, settings, prep.fitted, [final], 64);
  assert.ok(Buffer.from(r.file).equals(Buffer.from(whole.file)));
  // Without its guide the first stage matches on the noisy plane, and the result differs.
  const unguided = { ...prep, guide: null };
  const other = pg.finishRun(png, settings, prep.fitted, [splitStage(prep, splitStage(unguided, null, settings), settings)], 64);
  assert.ok(!Buffer.from(other.file).equals(Buffer.from(whole.file)));
});
