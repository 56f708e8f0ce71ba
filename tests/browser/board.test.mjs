// The board as a person meets it: results marked out of date when their settings change, metrics
// of a refused reference gone, views offered only where the method has them, a plain verdict.
import { test, before, after } from 'node:test';
import assert from 'node:assert/strict';
import { writeFileSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { session, finishedText, ROOT, OUT } from './harness.mjs';

const SAMPLES = join(ROOT, 'sample-images');
const s = session(before, after);
const { pane } = s;

async function run(i) {
  await pane(i).locator('.run').click();
  assert.match(await finishedText(s.page, i), /done/);
}

test('at 1280 x 800 the first screen shows the settings, Run and most of the picture', async () => {
  const box = await pane(0).locator('.viewport').boundingBox();
  const run = await pane(0).locator('.run').boundingBox();
  assert.ok(run.y + run.height < 800, `Run is at ${run.y}`);
  await s.page.screenshot({ path: join(OUT, 'board-first-screen.png') });
  assert.ok(800 - box.y >= 300, `only ${800 - box.y} px of the picture show on the first screen`);
  await s.page.screenshot({ path: join(OUT, 'board-first-screen.png') });
});

test('a result is marked out of date after an edit and after loading settings', async () => {
  await s.page.waitForFunction(() => /Reference: cells-clean/.test(document.getElementById('reference-info').textContent));
  await run(0);
  assert.equal(await pane(0).evaluate((el) => el.classList.contains('stale')), false);
  assert.match(await pane(0).locator('.metrics').textContent(), /PSNR against reference\d/);
  assert.match(await pane(0).locator('.verdict').textContent(), /\w+/);
  await pane(0).locator('input[name="patch_graph.threshold"]').fill('3.5');
  assert.equal(await pane(0).evaluate((el) => el.classList.contains('stale')), true);
  assert.equal(await pane(0).locator('.stale-note').isVisible(), true);
  assert.match(await pane(0).locator('.save-png').textContent(), /runs the new settings first/);
  await run(0);
  assert.equal(await pane(0).evaluate((el) => el.classList.contains('stale')), false);

  await run(1);
  const file = join(OUT, 'board-settings.json');
  writeFileSync(file, JSON.stringify({ method: 'patch-graph', sigma: 25, patch_graph: { threshold: 3.5 } }));
  await pane(1).locator('.load-json').setInputFiles(file);
  await s.page.waitForFunction(() => document.querySelectorAll('.pane')[1].classList.contains('stale'));
  await s.page.screenshot({ path: join(OUT, 'board-stale.png'), fullPage: true });
});

test('metrics against a refused reference disappear', async () => {
  await s.page.setInputFiles('#reference', join(SAMPLES, 'board-clean.png'));
  await s.page.waitForFunction(() => /Reference not used/.test(document.getElementById('reference-info').textContent));
  assert.match(await pane(0).locator('.metrics').textContent(), /PSNR against referenceno reference/);
});

test('views are offered only where the method has them', async () => {
  // Pane 0 runs the patch-graph method, pane 1 was switched to it by its settings file.
  assert.equal(await pane(0).locator('input[value=cuts]').isVisible(), false);
  assert.equal(await pane(0).locator('.show-group').isVisible(), true);
  await pane(1).locator('select[name=method]').selectOption('pixel-graph');
  assert.equal(await pane(1).locator('input[value=cuts]').isVisible(), true);
  assert.equal(await pane(1).locator('.show-group').isVisible(), false);
  // Help for the parameters this method has, and only those.
  await pane(1).locator('.param-help summary').click();
  const help = await pane(1).locator('.param-help dt:visible').allTextContents();
  assert.ok(help.includes('Edge cut (× sigma)') && !help.includes('Threshold (× sigma)'), help.join(' | '));
  assert.match(await pane(1).locator('input[name="pixel_graph.cut_threshold"]').locator('..').getAttribute('title'), /edge/);
  await pane(1).locator('.param-help summary').click();
  // Labels and limits come from the core's table of settings; the ranges here are the README's
  // settings table (checked against the core's by a Rust test), 0 being allowed for the patch size.
  const limits = (name) => pane(0).locator(`input[name="${name}"]`).evaluate((e) => [e.min, e.max, e.step]);
  assert.deepEqual(await limits('patch_graph.search_radius'), ['2', '24', '1']);
  assert.deepEqual(await limits('patch_graph.patch_size'), ['0', '16', '1']);
  assert.deepEqual(await limits('pixel_graph.cut_threshold'), ['0.1', '1000', '0.1']);
  assert.match(await pane(0).locator('input[name="patch_graph.search_radius"]').locator('..').textContent(), /^Search radius/);
  assert.deepEqual(s.consoleErrors, []);
});

// The canvas of pane i as a plain array, kept in the page under `key`.
const grab = (i, key) => s.page.evaluate(([i, key]) => {
  const c = document.querySelectorAll('.pane')[i].querySelector('.picture');
  window[key] = Array.from(c.getContext('2d').getImageData(0, 0, c.width, c.height).data);
  return [c.width, c.height];
}, [i, key]);

test('flip, split and difference show the two results as they are', async () => {
  await pane(0).locator('input[value=result]').check();
  await pane(1).locator('input[value=result]').check();
  const [w, h] = await grab(0, 'A');
  await grab(1, 'B');
  assert.equal(await pane(0).locator('.compare-with').inputValue(), 'B'); // the only other setting
  await pane(0).locator('input[value=other]').check();
  await grab(0, 'flip');
  await pane(0).locator('input[value=difference]').check();
  await grab(0, 'diff');
  await pane(0).locator('input[value=split]').check();
  await pane(0).locator('.split-at').fill('50');
  await grab(0, 'split');
  // Checked against the definitions: flip = B; difference = 8 |A - B| (RGB mean); split = A left of
  // the line, B right of it.
  const bad = await s.page.evaluate(([w, h]) => {
    const { A, B, flip, diff, split } = window;
    const errors = [];
    if (flip.some((v, i) => v !== B[i])) errors.push('flip is not B');
    for (let i = 0; i < A.length; i += 4) {
      const d = (Math.abs(A[i] - B[i]) + Math.abs(A[i + 1] - B[i + 1]) + Math.abs(A[i + 2] - B[i + 2])) / 3;
      if (diff[i] !== Math.min(255, Math.round(d * 8))) { errors.push(`difference at ${i / 4}`); break; }
    }
    const at = Math.round(w / 2);
    for (let y = 0; y < h; y += 7) {
      for (const x of [0, at - 1, at + 1, w - 1]) {
        const i = (y * w + x) * 4;
        const want = x < at ? A : B;
        if (split[i] !== want[i]) { errors.push(`split at ${x},${y}`); break; }
      }
    }
    if (A.every((v, i) => v === B[i])) errors.push('A and B are the same picture; the test shows nothing');
    return errors;
  }, [w, h]);
  assert.deepEqual(bad, []);
  await s.page.screenshot({ path: join(OUT, 'board-split.png') });

  // The line's handle on the view: dragged to a quarter of the picture's width, the line follows
  // (and the view does not pan); arrow keys on it move it by 1%.
  const divider = pane(0).locator('.divider');
  const d = await divider.boundingBox();
  const pic = await pane(0).locator('.picture').boundingBox();
  const before = pic;
  await s.page.mouse.move(d.x + d.width / 2, d.y + d.height / 2);
  await s.page.mouse.down();
  await s.page.mouse.move(pic.x + pic.width / 4, d.y + d.height / 2, { steps: 5 });
  await s.page.mouse.up();
  const value = Number(await pane(0).locator('.split-at').inputValue());
  assert.ok(Math.abs(value - 25) <= 1, `dragged to a quarter, the line is at ${value}%`);
  assert.deepEqual(await pane(0).locator('.picture').boundingBox(), before, 'dragging the line panned the view');
  const moved = await divider.boundingBox();
  assert.ok(Math.abs(moved.x + moved.width / 2 - (pic.x + (pic.width * value) / 100)) <= 1.5, 'the handle sits on the line');
  await grab(0, 'split');
  const wrong = await s.page.evaluate(([w, h, v]) => {
    const { A, B, split } = window;
    const at = Math.round((w * v) / 100);
    const errors = [];
    for (let y = 0; y < h; y += 7) {
      for (const x of [0, at - 1, at + 1, w - 1]) {
        const i = (y * w + x) * 4;
        if (split[i] !== (x < at ? A : B)[i]) { errors.push(`split at ${x},${y}`); break; }
      }
    }
    return errors;
  }, [w, h, value]);
  assert.deepEqual(wrong, []);
  await divider.focus();
  await s.page.keyboard.press('ArrowRight');
  assert.equal(Number(await pane(0).locator('.split-at').inputValue()), value + 1);
  await pane(0).locator('input[value=result]').check();
  assert.equal(await divider.isVisible(), false);
});

test('the table under the board is what Save metrics writes', async () => {
  const table = await s.page.locator('#summary-table tr').evaluateAll((rows) => rows.map((r) => [...r.children].map((c) => c.textContent).join(',')));
  const [d] = await Promise.all([s.page.waitForEvent('download'), s.page.locator('#save-csv').click()]);
  const path = join(OUT, d.suggestedFilename());
  await d.saveAs(path);
  const csv = readFileSync(path, 'utf8').trim().split('\n');
  assert.deepEqual(table, csv);
  assert.ok(csv[0].includes('threshold') && csv.length === 3, csv.join('\n'));
  // Parameter columns carry the settings file's names (README, "Settings") and only the row's
  // own method fills its columns: pane 0 is patch-graph, pane 1 pixel-graph.
  const head = csv[0].split(',');
  const cell = (row, name) => csv[row].split(',')[head.indexOf(name)];
  for (const name of ['threshold', 'group_size_hard', 'search_radius', 'graph', 'filter', 'cut_threshold', 'passes']) {
    assert.ok(head.includes(name), `${name} missing from ${csv[0]}`);
  }
  assert.deepEqual([cell(1, 'method'), cell(1, 'group_size_hard') !== '', cell(1, 'cut_threshold')], ['patch-graph', true, '']);
  assert.deepEqual([cell(2, 'method'), cell(2, 'group_size_hard'), cell(2, 'cut_threshold') !== ''], ['pixel-graph', '', true]);
});

test('at 1920 x 1080 the views of different methods stay in line', async () => {
  // Pane 0 is a patch-graph setting and pane 1 a pixel-graph one; opening pane 0's help makes
  // its form far taller than pane 1's.
  await s.page.setViewportSize({ width: 1920, height: 1080 });
  await pane(0).locator('.param-help summary').click();
  const tops = [];
  for (const i of [0, 1]) tops.push((await pane(i).locator('.viewport').boundingBox()).y);
  const forms = [];
  for (const i of [0, 1]) forms.push((await pane(i).locator('.controls').boundingBox()).height);
  await s.page.screenshot({ path: join(OUT, 'board-1920.png') });
  await pane(0).locator('.param-help summary').click();
  await s.page.setViewportSize({ width: 1280, height: 800 });
  assert.notEqual(forms[0], forms[1], 'the two forms have the same height; the test shows nothing');
  assert.ok(Math.abs(tops[0] - tops[1]) <= 1, `views at ${tops[0]} and ${tops[1]} px`);
});

test('on a phone-sized window nothing runs off the side', async () => {
  await s.page.setViewportSize({ width: 390, height: 844 });
  const overflow = await s.page.evaluate(() => document.documentElement.scrollWidth - window.innerWidth);
  await s.page.screenshot({ path: join(OUT, 'board-phone.png'), fullPage: false });
  await s.page.setViewportSize({ width: 1280, height: 800 });
  assert.ok(overflow <= 0, `the page is ${overflow} px wider than the window`);
});

test('every control can be reached and used from the keyboard, the patch group included', async () => {
  // Tab order: every visible, enabled control is reached by Tab alone; of a group of radio buttons
  // one is (arrow keys move within the group, as browsers do).
  const want = await s.page.evaluate(() => {
    const all = [...document.querySelectorAll('button, input, select, summary, [tabindex="0"]')]
      .filter((e) => !e.disabled && e.checkVisibility() && e.tabIndex >= 0);
    all.forEach((e, i) => { e.dataset.k = String(i); });
    return all.map((e) => (e.type === 'radio' ? `radio:${e.name}` : e.dataset.k));
  });
  assert.ok(want.length > 30, `only ${want.length} controls found; the test would show nothing`);
  const reached = new Set();
  await s.page.evaluate(() => document.activeElement && document.activeElement.blur());
  for (let i = 0; i < want.length * 2 + 10; i++) {
    await s.page.keyboard.press('Tab');
    reached.add(await s.page.evaluate(() => {
      const e = document.activeElement;
      return e && e.dataset.k !== undefined ? (e.type === 'radio' ? `radio:${e.name}` : e.dataset.k) : '';
    }));
  }
  const missed = [...new Set(want)].filter((k) => !reached.has(k));
  const names = await s.page.evaluate((ks) => ks.map((k) => {
    const e = document.querySelector(`[data-k="${k}"]`);
    return e ? (e.getAttribute('aria-label') || e.name || e.id || e.textContent.trim().slice(0, 30) || e.className) : k;
  }), missed);
  assert.deepEqual(names, [], 'not reached by Tab');

  // The patch group from the keyboard: tick the box (Space), then Enter on the view draws the
  // group at the view's centre; arrow keys move the view so any point can be brought there.
  await pane(0).locator('.show-group').focus();
  if (!(await pane(0).locator('.show-group').isChecked())) await s.page.keyboard.press('Space');
  await pane(0).locator('.viewport').focus();
  await s.page.keyboard.press('ArrowLeft');
  await s.page.keyboard.press('Enter');
  // The group comes from a worker: wait for the overlay to be drawn on.
  await s.page.waitForFunction(() => {
    const c = document.querySelector('.pane .overlay');
    return c.getContext('2d').getImageData(0, 0, c.width, c.height).data.some((v, i) => i % 4 === 3 && v > 0);
  }, null, { timeout: 30000 });
  // X on the view flips to the other setting's result and back.
  await s.page.keyboard.press('x');
  assert.equal(await pane(0).locator('input[value=other]').isChecked(), true);
  await s.page.keyboard.press('x');
  assert.equal(await pane(0).locator('input[value=result]').isChecked(), true);
  assert.deepEqual(s.consoleErrors, []);
});
