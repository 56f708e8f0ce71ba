// The values "Sweep a parameter" makes: evenly spaced, or spaced in ratio for the pixel graph's
// strength. Closed forms; no browser needed.
import { test } from 'node:test';
import assert from 'node:assert/strict';
import { sweepValues } from '../../www/sweep.js';

test('sweep values are evenly spaced, or in ratio, and whole where the parameter is', () => {
  assert.deepEqual(sweepValues(2, 3.5, false), [2, 2.5, 3, 3.5]);
  // 1 x 16^(i / 3), to three digits: 16^(1/3) = 2.5198, 16^(2/3) = 6.3496.
  assert.deepEqual(sweepValues(1, 16, false, true), [1, 2.52, 6.35, 16]);
  // Whole numbers: 1, 1.67, 2.33, 3 round to 1, 2, 2, 3; the repeat is dropped.
  assert.deepEqual(sweepValues(1, 3, true), [1, 2, 3]);
  // A ratio needs both ends above 0: otherwise even spacing.
  assert.deepEqual(sweepValues(0, 3, false, true), [0, 1, 2, 3]);
});
