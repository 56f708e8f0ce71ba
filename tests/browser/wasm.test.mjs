// The wasm module itself, in Node: decode, denoise a small image, errors as exceptions.
import { test } from 'node:test';
import assert from 'node:assert/strict';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { ROOT } from './harness.mjs';

const pg = await import(join(ROOT, 'www', 'pkg', 'patchgraph.js'));
pg.initSync({ module: readFileSync(join(ROOT, 'www', 'pkg', 'patchgraph_bg.wasm')) });
const sample = readFileSync(join(ROOT, 'sample-images', 'cells-noisy.png'));

test('open reports size, depth and an RGBA preview', () => {
  const info = pg.open(sample, 64);
  assert.equal(info.width, 256);
  assert.equal(info.bitDepth, 8);
  assert.equal(info.rgba.length, 256 * 256 * 4);
});

test('denoise returns a PNG of the same size and a report', () => {
  const settings = JSON.parse(pg.defaultSettings());
  settings.method = 'pixel-graph';
  const calls = [];
  const r = pg.denoise(sample, JSON.stringify(settings), 64, (f) => calls.push(f));
  assert.equal(pg.open(r.png, 64).width, 256);
  assert.ok(calls.length > 0 && calls.every((f) => f >= 0 && f <= 1));
  assert.equal(JSON.parse(r.report).method, 'pixel-graph');
});

test('errors arrive as exceptions with the plain message', () => {
  assert.throws(() => pg.open(new Uint8Array(0), 64), /the file is empty/);
  assert.throws(() => pg.open(new TextEncoder().encode('hello'), 64), /not an image/);
  assert.throws(() => pg.checkSettings('{"sigma": -3}'), /sigma must be between 0 and 65535, got -3/);
  assert.throws(() => pg.denoise(sample, '{"bogus": 1}', 64, () => {}), /not valid/);
});
