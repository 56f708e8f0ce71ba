// Images the browser tests make themselves (no files from elsewhere).
import { crc32, deflateSync } from 'node:zlib';

// A valid grey 8-bit PNG of w x h pixels, zeros or `pixels` (ISO/IEC 15948: signature, IHDR, zlib
// IDAT with filter byte 0 per row, IEND, CRC-32).
export function greyPng(w, h, pixels = null) {
  const chunk = (type, data) => {
    const body = Buffer.concat([Buffer.from(type, 'latin1'), data]);
    const len = Buffer.alloc(4); len.writeUInt32BE(data.length);
    const crc = Buffer.alloc(4); crc.writeUInt32BE(crc32(body));
    return Buffer.concat([len, body, crc]);
  };
  const ihdr = Buffer.alloc(13);
  ihdr.writeUInt32BE(w, 0); ihdr.writeUInt32BE(h, 4); ihdr[8] = 8; ihdr[9] = 0;
  return Buffer.concat([Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]), chunk('IHDR', ihdr),
    chunk('IDAT', deflateSync(rows(w, h, pixels))), chunk('IEND', Buffer.alloc(0))]);
}

function rows(w, h, pixels) {
  const raw = Buffer.alloc((w + 1) * h);
  if (pixels) for (let y = 0; y < h; y += 1) raw.set(pixels.subarray(y * w, (y + 1) * w), y * (w + 1) + 1);
  return raw;
}

// A smooth scene with grainy noise: white noise (a fixed xorshift sequence, Box-Muller) filtered
// by [1 2 1] / 4 each way, as resampling or demosaicing leaves it.
export function grainyPng(n) {
  let s = 2463534242;
  const uniform = () => { s ^= s << 13; s >>>= 0; s ^= s >>> 17; s ^= s << 5; s >>>= 0; return (s + 0.5) / 4294967296; };
  const white = Array.from({ length: (n + 2) * (n + 2) }, () => 20 * Math.sqrt(-2 * Math.log(uniform())) * Math.cos(2 * Math.PI * uniform()));
  const a = [0.25, 0.5, 0.25];
  const px = new Uint8Array(n * n);
  for (let y = 0; y < n; y += 1) {
    for (let x = 0; x < n; x += 1) {
      let v = 100 + 50 * Math.sin(x / 17) * Math.cos(y / 23);
      for (let i = 0; i < 3; i += 1) for (let j = 0; j < 3; j += 1) v += a[i] * a[j] * white[(y + i) * (n + 2) + x + j];
      px[y * n + x] = Math.max(0, Math.min(255, Math.round(v)));
    }
  }
  return greyPng(n, n, px);
}
