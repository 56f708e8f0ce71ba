// The values "Sweep a parameter" makes: evenly spaced, or spaced in ratio for the pixel graph's
// strength. Closed forms; no browser needed.
import { test } from 'node:test';
import assert from 'node:assert/strict';
import { sweepValues } from '../../www/sweep.js';

test('sweep values are evenly spaced, or in ratio, and whole where the parameter is', () => {
  assert.deepEqual(sweepValues(2, 3.5, false), [2, 2.5, 3, 3.5]);
  // 0.5 x 32^(i / 3): each value 32^(1/3) = 3.1748 times the last.
  const r = sweepValues(0.5, 16, false, true);
  [0.5, 0.5 * 32 ** (1 / 3), 0.5 * 32 ** (2 / 3), 16].forEach((want, i) => assert.ok(Math.abs(r[i] - want) < 1e-5, `${r}`));
  // Whole numbers: 1, 1.67, 2.33, 3 round to 1, 2, 2, 3; the repeat is dropped.
  assert.deepEqual(sweepValues(1, 3, true), [1, 2, 3]);
  // A ratio needs both ends above 0: otherwise even spacing.
  assert.deepEqual(sweepValues(0, 3, false, true), [0, 1, 2, 3]);
});
