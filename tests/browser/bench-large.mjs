// Browser benchmark for very large images: the inputs left by tests/bench/large.py go through
// the page as a user would (file picker, Run on setting A with the default patch-graph method,
// Save PNG), with all workers. Reports open and run seconds, the peak wasm memory of a worker
// running bands and of the worker preparing or finishing the whole image, the longest pause of
// the page's main thread (a 100 ms timer's worst lateness), and whether the saved PNG equals the
// CLI's result byte for byte (full resolution, though the page shows a shrunk view).
// Usage: node tests/browser/bench-large.mjs WORKDIR   (prints a Markdown section)
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { start, OUT } from './harness.mjs';

const work = process.argv[2];
const record = JSON.parse(readFileSync(join(work, 'cli.json'), 'utf8'));
const mib = (b) => (Number(b) / 2 ** 20).toFixed(0);
const h = await start();
const rows = [];
for (const [name, c] of Object.entries(record)) {
  const page = await h.context.newPage();
  await page.goto(h.url);
  await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
  await page.evaluate(() => {
    window.lagMs = 0;
    let last = performance.now();
    setInterval(() => { const now = performance.now(); window.lagMs = Math.max(window.lagMs, now - last - 100); last = now; }, 100);
  });
  const base = c.input.split('/').pop();
  const t0 = Date.now();
  await page.setInputFiles('#file', c.input);
  await page.waitForFunction((n) => document.getElementById('source-info').textContent.startsWith(`${n}:`), base, { timeout: 600000 });
  const openSeconds = (Date.now() - t0) / 1000;
  const pane = page.locator('.pane').nth(0);
  await pane.locator('select[name=method]').selectOption('patch-graph');
  await pane.locator('.run').click();
  await pane.locator('.stage').filter({ hasText: /done in|failed/ }).waitFor({ timeout: 3600000 });
  const stage = await pane.locator('.stage').textContent();
  if (!/done/.test(stage)) throw new Error(`${name}: ${stage}: ${await pane.locator('.error').textContent()}`);
  const d = await pane.evaluate((el) => ({ ...el.dataset }));
  const lag = await page.evaluate(() => window.lagMs);
  await page.screenshot({ path: join(OUT, `large-${name}.png`) });
  const [dl] = await Promise.all([page.waitForEvent('download', { timeout: 600000 }), pane.locator('.save-png').click()]);
  const saved = join(work, `${name}-page.png`);
  await dl.saveAs(saved);
  const same = readFileSync(saved).equals(readFileSync(c.cli_output));
  rows.push(`| ${name} | ${openSeconds.toFixed(1)} | ${Number(d.seconds).toFixed(0)} | ${d.workers} | ${mib(d.bandBytes)} | `
    + `${mib(d.wholeBytes)} | ${lag.toFixed(0)} | ${same ? 'yes' : 'NO'} |`);
  await page.close();
}
await h.close();
console.log([
  '## Very large images, in the page',
  '',
  'The same inputs through the page in headless Chromium (tests/browser/bench-large.mjs): file picker, Run, Save PNG; '
  + 'one run split into bands across all workers. Views are shrunk (factor 3 and 4); the saved PNG is full size.',
  '',
  '| image | open, s | run, s | workers | band worker peak, MiB | whole-image worker peak, MiB | longest main-thread pause, ms | saved PNG = CLI result |',
  '|---|---|---|---|---|---|---|---|',
  ...rows,
  '',
].join('\n'));
