// The worker's message handling, shared by the served page (worker.js, an ES module worker) and
// the one-file page (a classic worker built from this text by scripts/make-single-file.mjs).
// Messages: {kind, ...}; replies {ok, r, memoryBytes} or {ok: false, message}; progress as
// {progress, stage}. memoryBytes is this worker's wasm memory, which only grows: its peak so far.

// A module of one function using i8x16.splat and i8x16.popcnt: valid only where wasm SIMD is.
const SIMD_PROBE = new Uint8Array([0, 97, 115, 109, 1, 0, 0, 0, 1, 5, 1, 96, 0, 1, 123, 3, 2, 1, 0, 10, 10, 1, 8, 0, 65, 0,
  253, 15, 253, 98, 11]);
export const simdSupported = () => WebAssembly.validate(SIMD_PROBE);

// `build` names the wasm build in use ('simd128' or 'baseline'); every reply carries it.
export function installWorker(pg, ready, build) {
  // The core's limit, as the CLI's default (read once the wasm is ready).
  let maxMegapixels = null;
  const keys = ['rgba', 'file', 'residual', 'cuts', 'detail', 'planes', 'num', 'den'];
  // Large arrays move to the page instead of being copied; `planes` is an array of them.
  const buffers = (r) => keys.filter((k) => r && typeof r === 'object' && r[k])
    .flatMap((k) => (Array.isArray(r[k]) ? r[k] : [r[k]]))
    .filter((a) => ArrayBuffer.isView(a)).map((a) => a.buffer);
  const progress = (fraction, stage) => self.postMessage({ progress: fraction, stage });
  let assembler = null;
  self.onmessage = async (event) => {
    const m = event.data;
    try {
      const exports = await ready;
      maxMegapixels ??= pg.maxMegapixels();
      const start = performance.now();
      let r;
      switch (m.kind) {
        case 'defaults': r = { settings: pg.defaultSettings(), fields: pg.settingFields(), choices: pg.settingChoices(), methods: pg.methods(), build }; break;
        case 'check': r = pg.checkSettings(m.settings); break;
        case 'runPlan': r = pg.runPlan(m.settings, m.pages); break;
        case 'open': r = pg.open(m.bytes, maxMegapixels); break;
        case 'denoise': r = pg.denoise(m.bytes, m.settings, maxMegapixels, progress, Boolean(m.estimate)); break;
        case 'stackAround': r = { units: Array.from(pg.stackAround(m.unit, m.pages, m.units, m.settings)) }; break;
        case 'sliceFirst': r = pg.sliceFirstStage(m.bytes, m.unit, m.pages, m.units, m.settings, maxMegapixels, progress); break;
        case 'sliceSecond':
          r = pg.sliceSecondStage(m.bytes, m.unit, m.pages, m.units, m.settings, m.basics, maxMegapixels, progress, Boolean(m.estimate));
          break;
        case 'prepare': r = pg.prepareRun(m.bytes, m.settings, maxMegapixels, Boolean(m.probe)); break;
        // A split run's assembler lives in a worker of its own (tasks.js ownWorker), one stage at a time.
        case 'assemblerStart': assembler = new pg.BandAssembler(m.bands, m.width, m.height, m.planes); r = {}; break;
        case 'assemblerAdd': assembler.add(m.index, m.num, m.den); r = {}; break;
        case 'assemblerFinish': r = { planes: assembler.finish() }; assembler = null; break;
        case 'estimate': r = { estimate: pg.estimateError(m.bytes, m.fitted, m.result, m.probe, maxMegapixels) }; break;
        case 'band':
          r = pg.runBand(m.settings, m.sigma, m.range, m.width, m.height, m.band, m.spectra, m.noisy, m.basic, m.guide, progress);
          break;
        case 'finish': r = pg.finishRun(m.bytes, m.settings, m.fitted, m.planes, maxMegapixels); break;
        case 'noise': r = pg.fitNoise(m.bytes, maxMegapixels); break;
        case 'unitFile': r = { file: pg.unitFile(m.bytes, m.unit, maxMegapixels) }; break;
        case 'assemble': r = pg.assembleFile(m.bytes, m.results, m.settings, maxMegapixels); break;
        case 'compare': r = pg.compare(m.clean, m.test, maxMegapixels); break;
        case 'group': r = pg.groupAt(m.bytes, m.settings, m.x, m.y, maxMegapixels); break;
        default: throw new Error(`unknown request ${m.kind}`);
      }
      const memory = (exports && exports.memory) || (pg.__wasm && pg.__wasm.memory);
      const memoryBytes = memory ? memory.buffer.byteLength : null;
      if (r && typeof r === 'object') {
        r.seconds = (performance.now() - start) / 1000;
        r.memoryBytes = memoryBytes;
      }
      self.postMessage({ ok: true, r, memoryBytes, build }, buffers(r));
    } catch (err) {
      self.postMessage({ ok: false, message: String((err && err.message) || err) });
    }
  };
}
