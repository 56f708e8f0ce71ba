// Browser benchmark: the same denoise in headless Chromium (wasm with simd128, in a worker) and
// natively (the CLI on one thread), after a warm-up, median of 3; then two workers at once against
// one, for the page's parallelism across panes. Prints a Markdown section.
// Usage: node tests/browser/bench.mjs [IMAGE.png]
import { execFileSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { start, ROOT } from './harness.mjs';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');
const image = process.argv[2] || join(ROOT, 'sample-images', 'chart-noisy.png');
const median = (a) => [...a].sort((x, y) => x - y)[Math.floor(a.length / 2)];

function native(method) {
  const runs = [];
  for (let i = 0; i < 4; i += 1) {
    const out = execFileSync(CLI, ['denoise', image, '-o', '/tmp/pg-bench-native.png', '--method', method, '--sigma', '20', '--json'],
      { encoding: 'utf8', env: { ...process.env, RAYON_NUM_THREADS: '1' } });
    if (i > 0) runs.push(JSON.parse(out).seconds);
  }
  return median(runs);
}

const h = await start();
const page = await h.context.newPage();
await page.goto(h.url);
await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
const bytes = [...readFileSync(image)];
const rows = [];
for (const method of ['pixel-graph', 'patch-graph']) {
  const r = await page.evaluate(async ({ data, method: m }) => {
    const { task } = await import('./tasks.js');
    const settings = JSON.stringify({ method: m, sigma: 20 });
    let memory = 0;
    const one = async () => {
      const r = await task('denoise', { bytes: new Uint8Array(data), settings }).promise;
      memory = Math.max(memory, r.memoryBytes || 0);
      return r.seconds;
    };
    await one();
    const singles = [await one(), await one(), await one()];
    const t0 = performance.now();
    await Promise.all([one(), one()]);
    const pair = (performance.now() - t0) / 1000;
    const t1 = performance.now();
    await one();
    const alone = (performance.now() - t1) / 1000;
    return { singles, pair, alone, memory };
  }, { data: bytes, method });
  const wasm = median(r.singles);
  const nat = native(method);
  rows.push(`| ${method} | ${wasm.toFixed(3)} | ${nat.toFixed(3)} | ${(wasm / nat).toFixed(2)} | ${(2 * r.alone / r.pair).toFixed(2)} | ${(r.memory / 2 ** 20).toFixed(0)} |`);
}
await h.close();
console.log([
  '## Browser (wasm) against native',
  '',
  `Image ${image.replace(ROOT + '/', '')}, sigma 20; headless Chromium, one worker, wasm with simd128; native CLI on one thread `
  + '(RAYON_NUM_THREADS=1); medians of 3 after a warm-up. Scaling: two runs in two workers at once against one run alone.',
  '',
  '| method | wasm seconds | native seconds | wasm / native | 2-worker throughput gain | worker wasm memory, MiB |',
  '|---|---|---|---|---|---|',
  ...rows,
  '',
].join('\n'));
