// One patch-graph run split into bands across the page's workers: the result must not depend on
// how many workers share it, nor on which wasm build (SIMD or baseline) computes it, and must
// equal the command line's output for the same settings. Invariant checks: the same additions in
// the same order give the same bytes.
import { test, before, after } from 'node:test';
import assert from 'node:assert/strict';
import { execFileSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { start, finishedText, ROOT, OUT } from './harness.mjs';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');
const INPUT = join(ROOT, 'sample-images', 'board-noisy.png');
let h;
const consoleErrors = [];

before(async () => { h = await start(); });
after(async () => { await h.close(); });

// Opens the page with `query`, runs setting A (patch-graph, the default) on the colour board
// sample, and returns the downloaded PNG, its settings file, the stage line and the wasm build.
async function runWith(query) {
  const page = await h.context.newPage();
  page.on('console', (m) => { if (m.type() === 'error') consoleErrors.push(m.text()); });
  page.on('pageerror', (e) => consoleErrors.push(String(e)));
  await page.goto(`${h.url}${query}`);
  await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
  await page.evaluate(() => localStorage.clear());
  await page.setInputFiles('#file', INPUT);
  await page.waitForFunction(() => /board-noisy\.png: 320 × 240, RGB/.test(document.getElementById('source-info').textContent));
  const pane = page.locator('.pane').nth(0);
  await pane.locator('select[name=method]').selectOption('patch-graph');
  await pane.locator('.run').click();
  const stage = await finishedText(page, 0, 120000);
  assert.match(stage, /done/, await pane.locator('.error').textContent());
  const save = async (sel, name) => {
    const [d] = await Promise.all([page.waitForEvent('download'), pane.locator(sel).click()]);
    const path = join(OUT, name);
    await d.saveAs(path);
    return path;
  };
  const tag = query.replace(/[^a-z0-9]+/gi, '-');
  const png = await save('.save-png', `split${tag}.png`);
  const settings = await save('.save-json', `split${tag}.json`);
  const build = await page.evaluate(() => document.body.dataset.wasm);
  await page.close();
  return { png: readFileSync(png), settings, stage, build };
}

test('one worker, two workers, the baseline build and the CLI give the same bytes', async () => {
  const one = await runWith('?workers=1');
  const two = await runWith('?workers=2');
  const base = await runWith('?workers=2&wasm=baseline');
  assert.match(one.stage, /on 1 worker\b/);
  assert.match(two.stage, /on 2 workers/);
  assert.equal(one.build, 'simd128');
  assert.equal(base.build, 'baseline');
  assert.ok(one.png.equals(two.png), 'two workers changed the result');
  assert.ok(one.png.equals(base.png), 'the baseline build changed the result');
  const cliOut = join(OUT, 'split-cli.png');
  execFileSync(CLI, ['denoise', INPUT, '-o', cliOut, '--settings', one.settings]);
  assert.ok(one.png.equals(readFileSync(cliOut)), 'the page and the CLI differ');
  assert.notDeepEqual(one.png, readFileSync(INPUT));
  assert.deepEqual(consoleErrors, []);
});
