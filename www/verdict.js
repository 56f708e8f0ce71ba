// The plain sentence under a result's metrics: what its residual checks and its error estimate say.
// Plain JS without the page, so the rules can be tested on their own.

// Numbers as the page shows them ('–' where there is none).
export const fmt = (v, d = 2) => (v === null || v === undefined || Number.isNaN(v) ? '–' : Number(v).toFixed(d));

// One plain sentence from the residual checks. The limits are rules of thumb of ours (not from a
// source): they hold for white noise; grainy (correlated) noise leaves a correlated residual.
export function verdict(m, report) {
  return residualVerdict(m, report) + estimateVerdict(report.error_estimate);
}

// What the reference-free error estimate adds to the verdict, where it was given.
function estimateVerdict(e) {
  if (!e || !e.applies || e.gain_db === null || e.gain_db === undefined) return '';
  if (e.gain_db < 0) return ` The estimated error says the result is further from the clean image than the input (${fmt(e.gain_db)} dB).`;
  if (e.gain_db < 0.5) return ` The estimated error says the result is hardly closer to the clean image than the input (${fmt(e.gain_db)} dB).`;
  return ` The estimated error says the result is ${fmt(e.gain_db, 1)} dB closer to the clean image than the input.`;
}

function residualVerdict(m, report) {
  const correlatedNoise = /correlated/.test(report.noise.model);
  if (m.residual_edge_correlation > 0.15) return 'The removed part follows edges: some detail was removed with the noise.';
  if (m.residual_std_over_sigma > 1.15) return 'More than the noise was removed: fine detail may be lost.';
  // Grainy noise: on the bench's 14 camera JPEGs the residual was 0.51 to 0.89 of the level and
  // smooth whether the level was right or 3.6x too high (stained tissue), so these two checks
  // would send a user the wrong way; say what can be said.
  if (correlatedNoise) {
    return 'The noise is grainy, and for grainy noise these checks say little: compare a lower and a higher sigma side by side and look at what each removed.';
  }
  if (m.residual_lag1_correlation > 0.3) return 'The removed part is smoother than noise: it may hold structure.';
  if (m.residual_std_over_sigma < 0.7) return 'Less than the estimated noise was removed: some noise remains.';
  return 'The removed part looks like noise.';
}

// Which of several results' estimated errors (null where none applies) is the lowest: its index,
// or -1. Named only with two or more and every one estimated: a result without an estimate may be
// the best of all (the command line's sweep follows the same rule).
export function lowestError(errors) {
  if (errors.length < 2 || errors.some((e) => e === null || e === undefined)) return -1;
  return errors.reduce((best, e, i) => (e < errors[best] ? i : best), 0);
}
