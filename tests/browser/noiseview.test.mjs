// The noise panel draws the curve the core evened the noise out with: its JS form of the curve
// agrees with the core's (the CLI's `noise --json` evaluates it) on a file whose noise falls with
// brightness, as a camera's tone curve makes it. No browser needed: the plot's model is plain JS.
import { test } from 'node:test';
import assert from 'node:assert/strict';
import { execFileSync } from 'node:child_process';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ROOT } from './harness.mjs';
import { curveOf } from '../../www/noiseview.js';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');

// A 16-bit FITS image (FITS standard 4.0: 2880-byte blocks, big-endian, BZERO 32768 for unsigned).
function fits16(width, height, value) {
  const cards = [
    'SIMPLE  =                    T', 'BITPIX  =                   16', 'NAXIS   =                    2',
    `NAXIS1  = ${String(width).padStart(20)}`, `NAXIS2  = ${String(height).padStart(20)}`,
    'BZERO   =                32768', 'BSCALE  =                    1', 'END',
  ].map((c) => c.padEnd(80)).join('');
  const header = Buffer.from(cards.padEnd(Math.ceil(cards.length / 2880) * 2880), 'ascii');
  const data = Buffer.alloc(Math.ceil((width * height * 2) / 2880) * 2880);
  for (let y = 0; y < height; y += 1) {
    for (let x = 0; x < width; x += 1) data.writeInt16BE(Math.round(value(x, y)) - 32768, 2 * (y * width + x));
  }
  return Buffer.concat([header, data]);
}

test('the plotted curve is the core\'s curve', () => {
  // Known construction: std 60 at the dark end falling to 20 at the bright end, on a ramp (the
  // core's unit test of the curve uses the same shape); a fixed xorshift stream for the noise.
  let s = 0x9e3779b9;
  const uniform = () => { s ^= s << 13; s >>>= 0; s ^= s >>> 17; s ^= s << 5; s >>>= 0; return (s + 0.5) / 4294967296; };
  const normal = () => Math.sqrt(-2 * Math.log(uniform())) * Math.cos(2 * Math.PI * uniform());
  const file = join(mkdtempSync(join(tmpdir(), 'pg-curve-')), 'ramp.fits');
  writeFileSync(file, fits16(512, 512, (x) => {
    const y = 2000 + 100 * x;
    return y + (60 - (40 * (y - 2000)) / 51100) * normal();
  }));
  const fit = JSON.parse(execFileSync(CLI, ['noise', file, '--json'], { encoding: 'utf8' }));
  const ch = fit.channels[0];
  assert.ok(ch.curve_used, `the curve should be used here: ${fit.model}`);
  const js = curveOf(ch);
  for (const [y, v] of ch.curve_at) {
    assert.ok(Math.abs(js(y) - v) <= 1e-9 * Math.abs(v), `at ${y}: ${js(y)} against ${v}`);
  }
});
