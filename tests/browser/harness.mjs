// Shared by the browser tests and the browser benchmark: serve www/, launch Debian's Chromium
// through playwright-core with a fresh profile and no background networking.
import { chromium } from 'playwright-core';
import { mkdtempSync, mkdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import { serve } from '../../scripts/static-server.mjs';

export const ROOT = join(dirname(fileURLToPath(import.meta.url)), '..', '..');
export const OUT = join(ROOT, 'tests', 'browser', 'out');
mkdirSync(OUT, { recursive: true });

export async function start() {
  const server = await serve(join(ROOT, 'www'), 0);
  const url = `http://127.0.0.1:${server.address().port}/`;
  const context = await chromium.launchPersistentContext(mkdtempSync(join(tmpdir(), 'pg-chromium-')), {
    executablePath: process.env.CHROMIUM || '/usr/bin/chromium',
    headless: true,
    acceptDownloads: true,
    viewport: { width: 1280, height: 800 },
    args: ['--no-sandbox', '--disable-gpu', '--disable-background-networking', '--disable-component-update',
      '--disable-sync', '--no-first-run', '--disable-quic'],
  });
  return { server, url, context, async close() { await context.close(); server.close(); } };
}

// A page of the served app, loaded and ready, with its console errors collected.
export async function openReady(h) {
  const page = await h.context.newPage();
  const consoleErrors = [];
  page.on('console', (m) => { if (m.type() === 'error') consoleErrors.push(m.text()); });
  page.on('pageerror', (e) => consoleErrors.push(String(e)));
  await page.goto(h.url);
  await page.waitForSelector('body[data-ready=yes]', { timeout: 60000 });
  return { page, consoleErrors };
}

// One page for a file of tests: started before them, closed after; `s.page`, `s.consoleErrors`
// and `s.pane(i)` (the i-th setting) once started.
export function session(before, after) {
  const s = {};
  before(async () => {
    s.h = await start();
    Object.assign(s, await openReady(s.h));
  });
  after(async () => { await s.h.close(); });
  s.pane = (i) => s.page.locator('.pane').nth(i);
  return s;
}

// Waits until pane `i`'s progress line says its run finished and returns the line as it was then:
// a patch-graph pane moves on to its error estimate at once, so a later read may see that instead.
// Then waits for the pane to be free again (its error estimate, if any, done): Save waits till then.
export async function finishedText(page, i, timeout = 60000) {
  const handle = await page.waitForFunction((k) => {
    const t = document.querySelectorAll('.pane .stage')[k].textContent;
    return /done in|failed/.test(t) ? t : null;
  }, i, { timeout });
  const text = await handle.jsonValue();
  await page.locator('.pane').nth(i).locator('.run:not([disabled])').waitFor({ timeout });
  return text;
}
