// End-to-end tests of the page in real Chromium: input by picker, drop and samples; two settings
// side by side; download and compare with the CLI; stop; bad files; no request off the origin;
// no console errors. Screenshots go to tests/browser/out/ for review.
import { test, before, after } from 'node:test';
import assert from 'node:assert/strict';
import { execFileSync } from 'node:child_process';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { start, finishedText, ROOT, OUT } from './harness.mjs';
import { grainyPng } from './fixtures.mjs';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');
const SAMPLES = join(ROOT, 'sample-images');
let h; let page;
const consoleErrors = [];
const foreign = [];

before(async () => {
  h = await start();
  page = await h.context.newPage();
  page.on('console', (m) => { if (m.type() === 'error') consoleErrors.push(m.text()); });
  page.on('pageerror', (e) => consoleErrors.push(String(e)));
  h.context.on('request', (r) => { if (!r.url().startsWith(h.url) && !r.url().startsWith('blob:')) foreign.push(r.url()); });
  await page.goto(h.url);
  await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
});

after(async () => { await h.close(); });

const stage = (pane) => page.locator('.pane').nth(pane).locator('.stage');

async function runPane(i, click = true) {
  if (click) await page.locator('.pane').nth(i).locator('.run').click();
  let seen;
  try {
    seen = await finishedText(page, i);
  } catch (e) {
    const texts = await page.locator('.pane .stage').allTextContents();
    const errs = await page.locator('.pane .error').allTextContents();
    throw new Error(`pane ${i} did not finish: stages ${JSON.stringify(texts)}, errors ${JSON.stringify(errs)}, console ${JSON.stringify(consoleErrors)}`, { cause: e });
  }
  assert.match(seen, /done/);
}

async function download(i, selector) {
  const [d] = await Promise.all([page.waitForEvent('download'), page.locator('.pane').nth(i).locator(selector).click()]);
  const path = join(OUT, d.suggestedFilename());
  await d.saveAs(path);
  return path;
}

const metrics = (a, b) => JSON.parse(execFileSync(CLI, ['metrics', a, b, '--json'], { encoding: 'utf8' }));

test('the built-in sample loads on first visit with its reference', async () => {
  assert.match(await page.locator('#source-info').textContent(), /cells-noisy\.png: 256 × 256, grey, 8-bit/);
  assert.match(await page.locator('#reference-info').textContent(), /cells-clean\.png/);
  await page.screenshot({ path: join(OUT, 'first-visit.png'), fullPage: true });
});

test('the noise panel says what the fit found and draws its points and spectra', async () => {
  // The same fit as `patchgraph noise --json` on the same file (the CLI is the reference here).
  const cli = JSON.parse(execFileSync(CLI, ['noise', join(SAMPLES, 'cells-noisy.png'), '--json'], { encoding: 'utf8' }));
  await page.waitForSelector('#noise-fit:not([hidden])', { timeout: 30000 });
  await page.locator('#noise-fit summary').click();
  assert.equal(await page.locator('#noise-fit .noise-model').textContent(), `Noise: ${cli.model}.`);
  assert.ok((await page.locator('#noise-fit .noise-sentence').textContent()).startsWith(cli.explanation));
  const inked = await page.evaluate(() => {
    const c = document.querySelector('#noise-fit .noise-levels');
    const d = c.getContext('2d').getImageData(0, 0, c.width, c.height).data;
    let n = 0;
    for (let i = 3; i < d.length; i += 4) n += d[i] > 0 ? 1 : 0;
    return n;
  });
  assert.ok(inked > 500, `the level plot is empty (${inked} pixels drawn)`);
  assert.equal(await page.locator('#noise-fit .noise-spectra canvas').count(), cli.spectra_8x8.filter(Boolean).length);
  await page.locator('#noise-fit').screenshot({ path: join(OUT, 'noise-panel.png') });
});

test('two settings run side by side, differ, and match the CLI', async () => {
  await page.setInputFiles('#file', join(SAMPLES, 'chart-noisy.png'));
  await page.waitForFunction(() => /chart-noisy\.png: 256/.test(document.getElementById('source-info').textContent));
  await page.setInputFiles('#reference', join(SAMPLES, 'chart-clean.png'));
  await page.waitForFunction(() => /chart-clean/.test(document.getElementById('reference-info').textContent));
  // Setting B (pixel graph) on its non-local graph, so the CLI check below covers it too.
  await page.locator('.pane').nth(1).locator('select[name="pixel_graph.graph"]').selectOption('non-local');
  // The edge cut does nothing on that graph, so it is not offered (invariant of the form).
  assert.equal(await page.locator('.pane').nth(1).locator('input[name="pixel_graph.cut_threshold"]').isVisible(), false);
  // Nor is its line in "What these settings do" (the list holds every field's help).
  const helpTerms = page.locator('.pane').nth(1).locator('.param-help dt');
  await page.locator('.pane').nth(1).locator('.param-help summary').click();
  assert.equal(await helpTerms.filter({ hasText: /^Edge cut/ }).isVisible(), false);
  assert.equal(await helpTerms.filter({ hasText: /^Passes/ }).isVisible(), true);
  await page.locator('.pane').nth(1).locator('.param-help summary').click();
  // Both start before either ends: clicks one after the other (concurrent clicks can interleave
  // their mouse events), then both runs are awaited.
  await page.locator('.pane').nth(0).locator('.run').click();
  await page.locator('.pane').nth(1).locator('.run').click();
  await Promise.all([runPane(0, false), runPane(1, false)]);
  const a = await download(0, '.save-png');
  const b = await download(1, '.save-png');
  const input = join(SAMPLES, 'chart-noisy.png');
  assert.notDeepEqual(readFileSync(a), readFileSync(input));
  assert.notDeepEqual(readFileSync(a), readFileSync(b));
  const noisyPsnr = metrics(join(SAMPLES, 'chart-clean.png'), input).psnr;
  for (const [i, file] of [[0, a], [1, b]]) {
    // The same core natively: the CLI with the pane's saved settings gives the same PSNR.
    const settings = await download(i, '.save-json');
    const cliOut = join(OUT, `cli-${i}.png`);
    execFileSync(CLI, ['denoise', input, '-o', cliOut, '--settings', settings]);
    const page_ = metrics(join(SAMPLES, 'chart-clean.png'), file).psnr;
    const cli = metrics(join(SAMPLES, 'chart-clean.png'), cliOut).psnr;
    assert.ok(Math.abs(page_ - cli) <= 0.01, `pane ${i}: page ${page_} dB, CLI ${cli} dB`);
    assert.ok(page_ > noisyPsnr + 3, `pane ${i} improved only from ${noisyPsnr} to ${page_}`);
    // The pane shows the same PSNR that the CLI measures on the downloaded file.
    const shown = await page.locator('.pane').nth(i).locator('.metrics').textContent();
    assert.ok(shown.includes(`${page_.toFixed(2)} dB`), shown);
  }
  await page.screenshot({ path: join(OUT, 'two-settings.png'), fullPage: true });
});

test('the sigma shown is the fitted one; lowered by hand, the grain is kept', async () => {
  // Grainy noise: the quick estimate made on opening reads its fine grain (far below the level
  // the fit finds), so once the fit is in, the image line and the sigma box show the sigma a run
  // uses, and after a run the box holds the run's; unticking "Estimate sigma" then starts from
  // it. The CLI's --json report on the same file is the reference for that sigma.
  const file = join(OUT, 'grainy-160.png');
  writeFileSync(file, grainyPng(160));
  const cli = JSON.parse(execFileSync(CLI, ['denoise', file, '-o', join(OUT, 'grainy-cli.png'), '--json'], { encoding: 'utf8' }));
  const used = cli.sigma;
  assert.match(cli.noise_model.model, /correlated/);
  // The quick estimate (the mean of the channels' white-noise estimates) is far below it.
  const quick = Math.min(...Object.values(cli.noise_estimates[0]));
  assert.ok(quick < 0.5 * used, `quick ${quick}, fitted ${used}`);
  await page.setInputFiles('#file', file);
  await page.waitForFunction((s) => document.getElementById('source-info').textContent.includes(`grainy-160.png: 160 × 160, grey, 8-bit unsigned PNG, estimated sigma ${s}`),
    used.toFixed(2));
  const pane = page.locator('.pane').nth(0);
  await pane.locator('select[name=method]').selectOption('patch-graph');
  const box = pane.locator('input[name=sigma]');
  assert.equal(Number(await box.inputValue()), Number(used.toPrecision(4)));
  await runPane(0);
  assert.equal(Number(await box.inputValue()), Number(used.toPrecision(4)));
  // Half that sigma by hand: the noise model stays grainy (not white noise of that sigma).
  await pane.locator('input[name=sigma-auto]').uncheck();
  await box.fill(String(Number((used / 2).toPrecision(4))));
  await box.dispatchEvent('change');
  await runPane(0);
  assert.match(await pane.locator('.metrics').textContent(), /correlated Gaussian/);
});

test('the views switch and the patch group of a clicked point is outlined', async () => {
  const pane = page.locator('.pane').nth(0);
  await pane.locator('.views input[value=residual]').check();
  await pane.locator('.show-group').check();
  const box = await pane.locator('.viewport').boundingBox();
  await page.mouse.click(box.x + box.width / 2, box.y + box.height / 2);
  await page.waitForFunction(() => /group of \d+ patches/.test(document.querySelector('.pane .stage').textContent));
  await page.screenshot({ path: join(OUT, 'residual-and-group.png'), fullPage: true });
});

test('an image dropped on the page is opened', async () => {
  const bytes = [...readFileSync(join(SAMPLES, 'board-noisy.png'))];
  await page.evaluate((data) => {
    const dt = new DataTransfer();
    dt.items.add(new File([new Uint8Array(data)], 'dropped-board.png', { type: 'image/png' }));
    document.dispatchEvent(new DragEvent('drop', { dataTransfer: dt, bubbles: true, cancelable: true }));
  }, bytes);
  await page.waitForFunction(() => /dropped-board\.png: 320 × 240, RGB/.test(document.getElementById('source-info').textContent));
});

test('stop ends a run at once and the pane can run again', async () => {
  const pane = page.locator('.pane').nth(0);
  await pane.locator('.run').click();
  await pane.locator('.stop').click();
  await page.waitForFunction(() => document.querySelector('.pane .stage').textContent === 'stopped');
  assert.equal(await pane.locator('.run').isDisabled(), false);
  await runPane(0);
});

test('a bad file shows a message and the next good file still works', async () => {
  const bad = join(OUT, 'not-an-image.png');
  writeFileSync(bad, 'this is text, not a picture\n');
  await page.setInputFiles('#file', bad);
  await page.waitForFunction(() => /not-an-image\.png: the file is not an image/.test(document.getElementById('source-error').textContent));
  await page.screenshot({ path: join(OUT, 'bad-file.png'), fullPage: true });
  await page.setInputFiles('#file', join(SAMPLES, 'cells-noisy.png'));
  await page.waitForFunction(() => /cells-noisy\.png: 256/.test(document.getElementById('source-info').textContent));
  assert.equal(await page.locator('#source-error').textContent(), '');
  await runPane(1);
});

test('a batch of five files with one bad file gives four results and a report in one ZIP, in the order given', async () => {
  const bad = join(OUT, 'broken.png');
  writeFileSync(bad, 'not a picture');
  const files = ['cells-noisy.png', 'chart-noisy.png', 'board-noisy.png', 'chart-clean.png'].map((f) => join(SAMPLES, f));
  await page.locator('#batch > summary').click(); // the batch section opens on request
  await page.locator('#batch-pane').selectOption('B');
  await page.setInputFiles('#batch-files', [...files.slice(0, 2), bad, ...files.slice(2)]);
  const [d] = await Promise.all([page.waitForEvent('download', { timeout: 120000 }), page.locator('#batch-start').click()]);
  const zip = join(OUT, d.suggestedFilename());
  await d.saveAs(zip);
  // Read the ZIP with Python's zipfile (an independent reader): names, CRCs, the report.
  const listing = JSON.parse(execFileSync('python3', ['-c', `
import json, sys, zipfile
z = zipfile.ZipFile(sys.argv[1])
assert z.testzip() is None
print(json.dumps({"names": z.namelist(), "report": z.read("report.csv").decode()}))`, zip], { encoding: 'utf8' }));
  const results = listing.names.filter((n) => n.endsWith('.png'));
  assert.equal(results.length, 4, listing.names.join(', '));
  assert.match(listing.report, /broken\.png,,,,.*not an image/);
  // Pane B's one-worker method takes several files at once: the report still lists them in
  // the order given, whichever finished first.
  const order = listing.report.trim().split('\n').slice(1).map((l) => l.split(',')[0]);
  assert.deepEqual(order, ['cells-noisy.png', 'chart-noisy.png', 'broken.png', 'board-noisy.png', 'chart-clean.png']);
  assert.ok(listing.names.includes('settings.json'), 'the ZIP records the setting used');
  assert.match(await page.locator('#batch-summary').textContent(), /4 of 5 files denoised/);
  await page.screenshot({ path: join(OUT, 'batch.png'), fullPage: true });
});

test('opening another image during a run stops it; saving then gives the new image\'s result', async () => {
  await page.setInputFiles('#file', join(SAMPLES, 'chart-noisy.png'));
  await page.waitForFunction(() => /chart-noisy\.png: 256/.test(document.getElementById('source-info').textContent));
  await page.locator('.pane').nth(0).locator('.run').click();
  await page.setInputFiles('#file', join(SAMPLES, 'board-noisy.png'));
  await page.waitForFunction(() => /board-noisy\.png: 320/.test(document.getElementById('source-info').textContent));
  // The chart's run ends (stopped, or done just before) and frees the pane; nothing of it is kept.
  await page.locator('.pane').nth(0).locator('.run:not([disabled])').waitFor({ timeout: 60000 });
  assert.doesNotMatch(await stage(0).textContent(), /writing|cleaning|starting/);
  assert.ok(await page.locator('.pane').nth(0).locator('.save-png').isDisabled(), 'no result to save before a run on the new image');
  await runPane(0);
  const saved = await download(0, '.save-png');
  const settings = await download(0, '.save-json');
  const cliOut = join(OUT, 'cli-after-switch.png');
  execFileSync(CLI, ['denoise', join(SAMPLES, 'board-noisy.png'), '-o', cliOut, '--settings', settings]);
  // The CLI on the new image is the reference: the same result (the page is the CLI's byte for byte).
  const clean = join(SAMPLES, 'board-clean.png');
  assert.ok(Math.abs(metrics(clean, saved).psnr - metrics(clean, cliOut).psnr) <= 0.01);
});

test('nothing left the origin and the console stayed clean', async () => {
  assert.deepEqual(foreign, []);
  assert.deepEqual(consoleErrors, []);
});
