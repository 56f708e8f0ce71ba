// The worker's message handling, shared by the served page (worker.js, an ES module worker) and
// the one-file page (a classic worker built from this text by scripts/make-single-file.mjs).
// Messages: {kind, ...}; replies {ok, r} or {ok: false, message}; progress as {progress, stage}.
export function installWorker(pg, ready) {
  const MAX_MEGAPIXELS = 64;
  const buffers = (r) => ['rgba', 'png', 'residual', 'cuts'].filter((k) => r && r[k]).map((k) => r[k].buffer);
  self.onmessage = async (event) => {
    const m = event.data;
    try {
      const exports = await ready;
      let r;
      switch (m.kind) {
        case 'defaults': r = pg.defaultSettings(); break;
        case 'check': r = pg.checkSettings(m.json); break;
        case 'open': r = pg.open(m.bytes, MAX_MEGAPIXELS); break;
        case 'denoise': {
          const start = performance.now();
          r = pg.denoise(m.bytes, m.settings, MAX_MEGAPIXELS, (fraction, stage) => self.postMessage({ progress: fraction, stage }));
          r.seconds = (performance.now() - start) / 1000;
          // The wasm memory only grows, so after a run it is this worker's peak.
          const memory = (exports && exports.memory) || (pg.__wasm && pg.__wasm.memory);
          r.memoryBytes = memory ? memory.buffer.byteLength : null;
          break;
        }
        case 'compare': r = JSON.parse(pg.compare(m.clean, m.test, MAX_MEGAPIXELS)); break;
        case 'group': r = JSON.parse(pg.groupAt(m.bytes, m.settings, m.x, m.y, MAX_MEGAPIXELS)); break;
        default: throw new Error(`unknown request ${m.kind}`);
      }
      self.postMessage({ ok: true, r }, buffers(r));
    } catch (err) {
      self.postMessage({ ok: false, message: String((err && err.message) || err) });
    }
  };
}
