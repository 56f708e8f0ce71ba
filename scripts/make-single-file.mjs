// Writes the one-file page: node scripts/make-single-file.mjs WWW_DIR GLUE_NO_MODULES WASM BASE_WASM OUT.html
// Everything is inlined (CSS, the page's modules as one classic script, the worker as text that
// becomes a blob: URL, the wasm as base64, the samples as base64), because from file:// Chromium
// refuses module scripts, fetches and module workers. The CSP forbids every request.
import { readFileSync, writeFileSync, readdirSync, mkdirSync } from 'node:fs';
import { join, dirname } from 'node:path';

const [www, gluePath, wasmPath, baseWasmPath, out] = process.argv.slice(2);
const read = (f) => readFileSync(join(www, f), 'utf8');
// ES module text to plain script text: drop import lines and `export` keywords.
const unmodule = (src) => src.split('\n').filter((l) => !/^import\s/.test(l)).join('\n').replace(/^export\s+/gm, '');
const noCloseTag = (s) => s.replace(/<\/script/gi, '<\\/script');

// Each module in its own function scope (their private names may repeat); its exports become
// constants of the bundle, which is how the other modules' stripped imports find them.
const scoped = (f) => {
  const src = read(f);
  const names = [...src.matchAll(/^export\s+(?:async\s+)?(?:function|class|const|let)\s+([A-Za-z_$][\w$]*)/gm)].map((m) => m[1]);
  return `// ---- ${f}\nconst { ${names.join(', ')} } = (() => {\n${unmodule(src)}\nreturn { ${names.join(', ')} };\n})();`;
};
// The page's modules, each after those it imports, found from app.js down (a new module needs
// no list of its own here).
function moduleOrder(entry) {
  const order = [];
  const seen = new Set();
  const visit = (f) => {
    if (seen.has(f)) return;
    seen.add(f);
    for (const m of read(f).matchAll(/^import\s[^;]*from\s+'\.\/([\w-]+\.js)';/gm)) visit(m[1]);
    order.push(f);
  };
  visit(entry);
  return order;
}
const modules = moduleOrder('app.js').map(scoped).join('\n');
const bundle = modules.replace("new Worker(new URL(base ? './worker.js?baseline' : './worker.js', import.meta.url), { type: 'module' })", "null");
if (bundle.includes('import.meta')) throw new Error('a module still uses import.meta');

// Both builds ride along (one glue serves both: same exports); the worker decodes the one it uses.
const b64 = (p) => readFileSync(p).toString('base64');
const worker = [
  readFileSync(gluePath, 'utf8'),
  unmodule(read('worker-core.js')),
  `const simdWasm = '${b64(wasmPath)}';`,
  `const baseWasm = '${b64(baseWasmPath)}';`,
  'const simd = simdSupported();',
  'const wasmBytes = Uint8Array.from(atob(simd ? simdWasm : baseWasm), (c) => c.charCodeAt(0));',
  'wasm_bindgen.initSync({ module: wasmBytes });',
  "installWorker(wasm_bindgen, Promise.resolve(), simd ? 'simd128' : 'baseline');",
].join('\n');

const samples = {};
for (const f of readdirSync(join(www, 'samples')).filter((n) => n.endsWith('.png'))) {
  samples[f] = readFileSync(join(www, 'samples', f)).toString('base64');
}

const csp = "default-src 'none'; script-src 'unsafe-inline' 'wasm-unsafe-eval'; worker-src blob:; connect-src 'none'; "
  + "img-src blob: data:; style-src 'unsafe-inline'; object-src 'none'; base-uri 'none'; form-action 'none'";
let html = read('index.html');
html = html.replace(/<meta http-equiv="Content-Security-Policy" content="[^"]*">/, `<meta http-equiv="Content-Security-Policy" content="${csp}">`);
html = html.replace('<link rel="stylesheet" href="style.css">', `<style>\n${read('style.css')}</style>`);
html = html.replace('<script type="module" src="app.js"></script>\n', '');
const tail = [
  `<script type="text/plain" id="patchgraph-worker">${noCloseTag(worker)}</script>`,
  '<script>',
  "globalThis.patchgraphWorkerUrl = URL.createObjectURL(new Blob([document.getElementById('patchgraph-worker').textContent], { type: 'text/javascript' }));",
  `globalThis.patchgraphSamples = ${JSON.stringify(samples)};`,
  '</script>',
  `<script>\n(() => {\n${noCloseTag(bundle)}\n})();\n</script>`,
].join('\n');
html = html.replace('</body>', `${tail}\n</body>`);
mkdirSync(dirname(out), { recursive: true });
writeFileSync(out, html);
console.log(`wrote ${out} (${(html.length / 1e6).toFixed(1)} MB)`);
