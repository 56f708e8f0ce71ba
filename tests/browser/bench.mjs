// Browser benchmark: the same denoise in headless Chromium (wasm with simd128, in workers) and
// natively (the CLI), after a warm-up, medians of 3. Patch-graph: one run split across 1 worker
// and across all workers (the page's way), against the CLI on 1 thread and on all threads.
// Pixel-graph (one worker per run): 1 worker against the CLI on 1 thread, and two runs at once
// in two workers against one alone. Prints a Markdown section.
// Usage: node tests/browser/bench.mjs [IMAGE.png]
import { execFileSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { cpus } from 'node:os';
import { join } from 'node:path';
import { start, ROOT } from './harness.mjs';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');
const image = process.argv[2] || join(ROOT, 'sample-images', 'chart-noisy.png');
const median = (a) => [...a].sort((x, y) => x - y)[Math.floor(a.length / 2)];
const cores = cpus().length;

function native(method, threads) {
  const runs = [];
  for (let i = 0; i < 4; i += 1) {
    const out = execFileSync(CLI, ['denoise', image, '-o', '/tmp/pg-bench-native.png', '--method', method, '--sigma', '20', '--json'],
      { encoding: 'utf8', env: { ...process.env, RAYON_NUM_THREADS: String(threads) } });
    if (i > 0) runs.push(JSON.parse(out).seconds);
  }
  return median(runs);
}

const h = await start();
async function pageWith(query) {
  const page = await h.context.newPage();
  await page.goto(`${h.url}${query}`);
  await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
  return page;
}
const bytes = [...readFileSync(image)];

// In the page: `runs` timed runs after one warm-up; 'split' = the patch-graph way, 'one' = a
// single 'denoise' job, 'pair' = two 'denoise' jobs at once (seconds for both).
const timed = (page, method, mode) => page.evaluate(async ({ data, m, how }) => {
  const { task } = await import('./tasks.js');
  const { splitRun } = await import('./stitch.js');
  const settings = { method: m, sigma: 20 };
  let memory = 0;
  const single = async () => {
    const r = await task('denoise', { bytes: new Uint8Array(data), settings }).promise;
    memory = Math.max(memory, r.memoryBytes || 0);
  };
  const once = {
    split: async () => {
      const r = await splitRun(new Uint8Array(data), settings, () => {}).promise;
      memory = Math.max(memory, r.peakWorkerBytes || 0);
    },
    one: single,
    pair: () => Promise.all([single(), single()]),
  }[how];
  await once();
  const times = [];
  for (let i = 0; i < 3; i += 1) {
    const t0 = performance.now();
    await once();
    times.push((performance.now() - t0) / 1000);
  }
  return { times, memory };
}, { data: bytes, m: method, how: mode });

const one = await pageWith('?workers=1');
const all = await pageWith('');
const split1 = await timed(one, 'patch-graph', 'split');
const splitN = await timed(all, 'patch-graph', 'split');
const px1 = await timed(one, 'pixel-graph', 'one');
const pxPair = await timed(all, 'pixel-graph', 'pair');
await h.close();

const w1 = median(split1.times); const wN = median(splitN.times);
const n1 = native('patch-graph', 1); const nN = native('patch-graph', cores);
const p1 = median(px1.times); const pPair = median(pxPair.times); const pn1 = native('pixel-graph', 1);
const mib = (b) => (b / 2 ** 20).toFixed(0);
console.log([
  '## Browser (wasm) against native',
  '',
  `Image ${image.replace(ROOT + '/', '')}, sigma 20; headless Chromium, wasm with simd128; native CLI with RAYON_NUM_THREADS; `
  + `${cores} cores; medians of 3 after a warm-up, whole runs as the page does them (the CLI's own denoise time natively).`,
  '',
  '| method | wasm, 1 worker, s | native, 1 thread, s | wasm / native per core | wasm, all workers, s | native, all threads, s | worker scaling (1 -> all) | worker wasm memory, MiB |',
  '|---|---|---|---|---|---|---|---|',
  `| patch-graph (one run split in bands) | ${w1.toFixed(3)} | ${n1.toFixed(3)} | ${(w1 / n1).toFixed(2)} | ${wN.toFixed(3)} | `
  + `${nN.toFixed(3)} | ${(w1 / wN).toFixed(2)} | ${mib(Math.max(split1.memory, splitN.memory))} |`,
  `| pixel-graph (one worker per run; scaling = two runs at once) | ${p1.toFixed(3)} | ${pn1.toFixed(3)} | ${(p1 / pn1).toFixed(2)} | `
  + `${(pPair / 2).toFixed(3)} per run | – | ${(2 * p1 / pPair).toFixed(2)} | ${mib(Math.max(px1.memory, pxPair.memory))} |`,
  '',
].join('\n'));
