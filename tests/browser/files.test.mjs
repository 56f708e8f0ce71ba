// The files of the trades in the page: a 16-bit TIFF z-stack and a float FITS cube with blank
// pixels open with a slice control, run per image, and save whole (every page, the same type and
// format). The files are written, and the saved ones read back, by tifffile and astropy (PyPI).
import { test, before, after } from 'node:test';
import assert from 'node:assert/strict';
import { execFileSync } from 'node:child_process';
import { join } from 'node:path';
import { start, openReady, finishedText, ROOT, OUT } from './harness.mjs';

const CLI = process.env.PATCHGRAPH_BIN || join(ROOT, 'target', 'release', 'patchgraph');
const PY = process.env.PATCHGRAPH_PYTHON || join(ROOT, '.venv', 'bin', 'python');
const py = (code) => execFileSync(PY, ['-c', code], { encoding: 'utf8' }).trim();
let h; let page; let consoleErrors;

before(async () => {
  py(`
import numpy as np, tifffile
from astropy.io import fits
y, x = np.mgrid[0:160, 0:160]
clean = np.stack([20000 + 15000 * np.exp(-((x - 60 - 10 * k) ** 2 + (y - 80) ** 2) / 800.0) for k in range(3)])
rng = np.random.default_rng(3)
noisy = np.clip(clean + rng.normal(0, 1500, clean.shape), 0, 65535).astype(np.uint16)
np.save('${OUT}/stack-clean.npy', clean)
tifffile.imwrite('${OUT}/stack-in.tif', noisy, photometric='minisblack', description='three slices of our own', metadata=None)
cube = (clean[:2] / 10000.0 + rng.normal(0, 0.15, (2, 160, 160))).astype(np.float32)
cube[1, 10:20, 10:20] = np.nan
fits.PrimaryHDU(cube).writeto('${OUT}/cube-in.fits', overwrite=True)
`);
  h = await start();
  ({ page, consoleErrors } = await openReady(h));
});

after(async () => { await h.close(); });

const pane = () => page.locator('.pane').nth(0);

async function save(name) {
  const [d] = await Promise.all([page.waitForEvent('download', { timeout: 120000 }), pane().locator('.save-png').click()]);
  const path = join(OUT, name);
  await d.saveAs(path);
  return { path, suggested: d.suggestedFilename() };
}

test('a TIFF z-stack: one slice control for all settings, every page saved', async () => {
  await page.setInputFiles('#file', join(OUT, 'stack-in.tif'));
  await page.waitForFunction(() => /3 images/.test(document.getElementById('source-info').textContent));
  assert.equal(await page.locator('#slice-bar').isVisible(), true);
  assert.match(await page.locator('#slice-label').textContent(), /page 1 of 3/);
  assert.match(await page.locator('#source-info').textContent(), /16-bit unsigned TIFF/);
  // The stack's settings show (and only for stacks): neighbour slices, 1 by default.
  assert.equal(await pane().locator('input[name="patch_graph.neighbour_slices"]').inputValue(), '1');
  await pane().locator('.run').click();
  assert.match(await finishedText(page, 0), /done/);
  // Denoised as a slice of the volume: the page says how many slices lent their patches.
  const metrics = await pane().locator('.metrics').textContent();
  assert.match(metrics, /Slices joined1/);
  // The table under the board (= the metrics CSV) says the same, beside the setting.
  const table = await page.locator('#summary-table tr').evaluateAll((rows) => rows.map((r) => [...r.children].map((c) => c.textContent)));
  const col = (name) => table[1][table[0].indexOf(name)];
  assert.deepEqual([col('neighbour_slices'), col('slices_joined')], ['1', '1']);
  // Another slice: the pane has no result for it yet, and says nothing stale.
  await page.locator('#slice').fill('2');
  await page.waitForFunction(() => /^page 2 of 3$/.test(document.getElementById('slice-label').textContent));
  assert.equal(await pane().locator('.metrics dt').count(), 0);
  const { path, suggested } = await save('stack-out.tif');
  assert.match(suggested, /stack-in-denoised-A\.tif$/);
  await page.screenshot({ path: join(OUT, 'stack.png'), fullPage: true });
  // tifffile: three pages, 16-bit, the description kept, the run recorded, each page cleaner.
  const verdict = py(`
import numpy as np, tifffile
clean = np.load('${OUT}/stack-clean.npy')
with tifffile.TiffFile('${path}') as t:
    out = t.asarray(); p = t.pages[0]
    assert len(t.pages) == 3 and out.dtype == np.uint16, (len(t.pages), out.dtype)
    assert p.description == 'three slices of our own'
    assert p.tags['Software'].value.startswith('Patchgraph')
noisy = tifffile.imread('${OUT}/stack-in.tif')
for k in range(3):
    a, b = np.mean((out[k] - clean[k]) ** 2), np.mean((noisy[k].astype(float) - clean[k]) ** 2)
    assert a < 0.3 * b, (k, a, b)
print('ok')`);
  assert.equal(verdict, 'ok');
  // The command line with the same (default) settings writes the same samples: the page runs
  // each slice alone in a worker, the command line the whole stack at once.
  execFileSync(CLI, ['denoise', join(OUT, 'stack-in.tif'), '-o', join(OUT, 'stack-cli.tif')]);
  assert.equal(py(`
import numpy as np, tifffile
a, b = tifffile.imread('${path}'), tifffile.imread('${OUT}/stack-cli.tif')
print('same' if a.shape == b.shape and np.array_equal(a, b) else f'differ at {int(np.sum(a != b))} samples')`), 'same');
  // A single image shows no stack settings.
  await page.setInputFiles('#file', join(ROOT, 'sample-images', 'cells-noisy.png'));
  await page.waitForFunction(() => !document.body.hasAttribute('data-stack'));
  assert.equal(await pane().locator('input[name="patch_graph.neighbour_slices"]').isVisible(), false);
});

test('a float FITS cube with blank pixels saves as FITS, blanks where they were', async () => {
  await page.setInputFiles('#file', join(OUT, 'cube-in.fits'));
  await page.waitForFunction(() => /2 images/.test(document.getElementById('source-info').textContent));
  assert.match(await page.locator('#source-info').textContent(), /32-bit float FITS.*100 blank pixels/);
  await pane().locator('.run').click();
  await finishedText(page, 0);
  const { path, suggested } = await save('cube-out.fits');
  assert.match(suggested, /cube-in-denoised-A\.fits$/);
  const verdict = py(`
import numpy as np
from astropy.io import fits
with fits.open('${path}') as f:
    d, h = f[0].data, f[0].header
    src = fits.getdata('${OUT}/cube-in.fits')
    assert d.shape == (2, 160, 160) and d.dtype.kind == 'f' and d.dtype.itemsize == 4
    assert np.array_equal(np.isnan(d), np.isnan(src))
    assert 'Patchgraph' in ''.join(str(c) for c in h['HISTORY'])
print('ok')`);
  assert.equal(verdict, 'ok');
  assert.deepEqual(consoleErrors, []);
});
