// The one-file page, copied alone into an empty folder and opened from file://: it loads its
// inlined sample, takes a dropped image, denoises it and downloads the result, with no console
// error and no request besides the file itself and its own blob: worker.
import { test, before, after } from 'node:test';
import assert from 'node:assert/strict';
import { chromium } from 'playwright-core';
import { copyFileSync, mkdtempSync, readFileSync, readdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { execFileSync } from 'node:child_process';
import { finishedText, ROOT, OUT } from './harness.mjs';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');
let context; let page; let folder;
const errors = [];
const requests = [];

before(async () => {
  folder = mkdtempSync(join(tmpdir(), 'pg-offline-'));
  copyFileSync(join(ROOT, 'dist', 'patchgraph.html'), join(folder, 'patchgraph.html'));
  context = await chromium.launchPersistentContext(mkdtempSync(join(tmpdir(), 'pg-chromium-')), {
    executablePath: process.env.CHROMIUM || '/usr/bin/chromium', headless: true, acceptDownloads: true,
    viewport: { width: 1280, height: 800 },
    args: ['--no-sandbox', '--disable-gpu', '--disable-background-networking', '--disable-component-update',
      '--disable-sync', '--no-first-run', '--disable-quic'],
  });
  context.on('request', (r) => requests.push(r.url()));
  page = await context.newPage();
  page.on('console', (m) => { if (m.type() === 'error') errors.push(m.text()); });
  page.on('pageerror', (e) => errors.push(String(e)));
  await page.goto(`file://${join(folder, 'patchgraph.html')}`);
  await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
});

after(async () => { await context.close(); });

test('the file alone opens with its sample, takes a dropped image, denoises and downloads', async () => {
  assert.deepEqual(readdirSync(folder), ['patchgraph.html']);
  assert.match(await page.locator('#source-info').textContent(), /cells-noisy\.png: 256 × 256/);
  const bytes = [...readFileSync(join(ROOT, 'sample-images', 'chart-noisy.png'))];
  await page.evaluate((data) => {
    const dt = new DataTransfer();
    dt.items.add(new File([new Uint8Array(data)], 'dropped-chart.png', { type: 'image/png' }));
    document.dispatchEvent(new DragEvent('drop', { dataTransfer: dt, bubbles: true, cancelable: true }));
  }, bytes);
  await page.waitForFunction(() => /dropped-chart\.png: 256/.test(document.getElementById('source-info').textContent));
  const pane = page.locator('.pane').nth(0);
  await pane.locator('.run').click();
  assert.match(await finishedText(page, 0, 120000), /done/);
  const [d] = await Promise.all([page.waitForEvent('download'), pane.locator('.save-png').click()]);
  const saved = join(OUT, `offline-${d.suggestedFilename()}`);
  await d.saveAs(saved);
  const q = JSON.parse(execFileSync(CLI, ['metrics', join(ROOT, 'sample-images', 'chart-clean.png'), saved, '--json'], { encoding: 'utf8' }));
  const noisy = JSON.parse(execFileSync(CLI, ['metrics', join(ROOT, 'sample-images', 'chart-clean.png'), join(ROOT, 'sample-images', 'chart-noisy.png'), '--json'], { encoding: 'utf8' }));
  assert.ok(q.psnr > noisy.psnr + 3, `${q.psnr} vs noisy ${noisy.psnr}`);
  await page.screenshot({ path: join(OUT, 'offline.png'), fullPage: true });
});

test('no request besides the file itself and its blob: worker, and no console error', () => {
  const others = requests.filter((u) => !u.startsWith('file://') && !u.startsWith('blob:null/'));
  assert.deepEqual(others, []);
  assert.deepEqual(errors, []);
});
