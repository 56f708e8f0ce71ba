// Views that compare two settings' results in one place: the other setting's result (flip), a
// split at a chosen column, and the difference. All work on the 8-bit RGBA views both results
// already have (same size: one image, one shrink factor).

// Left of column `at` from `a`, the rest from `b`, with a one-pixel white divider.
export function split(a, b, width, height, at) {
  const out = new Uint8ClampedArray(b);
  const col = Math.max(0, Math.min(width, Math.round(at)));
  for (let y = 0; y < height; y += 1) {
    const row = y * width * 4;
    out.set(a.subarray(row, row + col * 4), row);
    if (col < width) out.fill(255, row + col * 4, row + col * 4 + 4);
  }
  return out;
}

// |a - b| per pixel (mean over RGB), times `gain`, as grey: black where the two agree.
export const DIFFERENCE_GAIN = 8;
export function difference(a, b, gain = DIFFERENCE_GAIN) {
  const out = new Uint8ClampedArray(a.length);
  for (let i = 0; i < a.length; i += 4) {
    const d = (Math.abs(a[i] - b[i]) + Math.abs(a[i + 1] - b[i + 1]) + Math.abs(a[i + 2] - b[i + 2])) / 3;
    const v = Math.min(255, Math.round(d * gain));
    out[i] = v; out[i + 1] = v; out[i + 2] = v; out[i + 3] = 255;
  }
  return out;
}
