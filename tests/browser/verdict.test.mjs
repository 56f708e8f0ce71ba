// The sentence under a result: its rules checked on the residual figures the bench measured.
// For grainy noise the residual was 0.51 to 0.89 of the level whether the level was right or far
// too high (BENCHMARKS.md, real-noise table: stained tissue read at 3.6x), so a low ratio must not
// tell the user that noise remains; for white noise it still does. No browser needed.
import { test } from 'node:test';
import assert from 'node:assert/strict';
import { verdict, lowestError } from '../../www/verdict.js';

const row = (ratio, lag1, edge) => ({ residual_std_over_sigma: ratio, residual_lag1_correlation: lag1, residual_edge_correlation: edge });
const report = (model, estimate = null) => ({ noise: { model }, error_estimate: estimate });

test('grainy noise: a low residual ratio does not say that noise remains', () => {
  // The over-smoothed tissue (ratio 0.54, edge +0.105) and a well-read astronaut (0.51, -0.128).
  for (const m of [row(0.54, 0.7, 0.105), row(0.51, 0.6, -0.128)]) {
    const s = verdict(m, report('correlated Gaussian'));
    assert.doesNotMatch(s, /some noise remains/);
    assert.match(s, /compare a lower and a higher sigma/);
  }
});

test('white noise keeps its residual checks; edges removed are named for any noise', () => {
  assert.match(verdict(row(0.6, 0.0, 0.0), report('white Gaussian')), /some noise remains/);
  assert.match(verdict(row(0.95, 0.4, 0.0), report('white Gaussian')), /smoother than noise/);
  assert.match(verdict(row(0.95, 0.0, 0.0), report('white Gaussian')), /looks like noise/);
  for (const model of ['white Gaussian', 'correlated Gaussian']) {
    assert.match(verdict(row(0.9, 0.0, 0.2), report(model)), /follows edges/);
  }
  // The error estimate's clause follows the residual sentence.
  const e = { applies: true, gain_db: 3.04 };
  assert.match(verdict(row(0.95, 0.0, 0.0), report('white Gaussian', e)), /looks like noise\. The estimated error says the result is 3\.0 dB closer/);
});

test('the lowest estimated error is named only when every result has an estimate', () => {
  // Invariant: the minimum, first of equals; none when any result lacks an estimate (one that
  // applies to fewer pixels or not at all may hide the best result) or there is only one.
  assert.equal(lowestError([3.1, 1.2, 2.0, 1.2]), 1);
  assert.equal(lowestError([3.1, null, 2.0]), -1);
  assert.equal(lowestError([2.0]), -1);
  assert.equal(lowestError([]), -1);
});
