// One zoom and position shared by every pane, so the same pixels line up side by side.
export const view = { scale: 1, x: 0, y: 0, width: 0, height: 0 };
const listeners = new Set();

export function onViewChange(fn) { listeners.add(fn); }

function changed() {
  for (const fn of listeners) fn(view);
}

// The view is in image pixels; a canvas holding a shrunk view (data-factor f) is drawn f times larger.
export function applyTo(canvases) {
  for (const c of canvases) {
    const f = Number(c.dataset.factor) || 1;
    c.style.transform = `translate(${view.x}px, ${view.y}px) scale(${view.scale * f})`;
  }
}

export function zoomAt(factor, cx, cy) {
  const s = Math.min(64, Math.max(1 / 64, view.scale * factor));
  const f = s / view.scale;
  view.x = cx - (cx - view.x) * f;
  view.y = cy - (cy - view.y) * f;
  view.scale = s;
  changed();
}

export function panBy(dx, dy) { view.x += dx; view.y += dy; changed(); }

export function setImageSize(w, h) { view.width = w; view.height = h; }

export function fit(viewport) {
  if (!view.width) return;
  const r = viewport.getBoundingClientRect();
  view.scale = Math.min(r.width / view.width, r.height / view.height);
  view.x = (r.width - view.width * view.scale) / 2;
  view.y = (r.height - view.height * view.scale) / 2;
  changed();
}

export function pixelForPixel(viewport) {
  const r = viewport.getBoundingClientRect();
  zoomAt(1 / view.scale, r.width / 2, r.height / 2);
}

// Wheel, drag and keys on one viewport move all of them. `onClick(ix, iy)` gets image pixels.
export function attach(viewport, onClick) {
  viewport.addEventListener('wheel', (e) => {
    e.preventDefault();
    const r = viewport.getBoundingClientRect();
    zoomAt(e.deltaY < 0 ? 1.25 : 0.8, e.clientX - r.left, e.clientY - r.top);
  }, { passive: false });
  let drag = null;
  viewport.addEventListener('pointerdown', (e) => {
    drag = { x: e.clientX, y: e.clientY, moved: 0 };
    viewport.setPointerCapture(e.pointerId);
  });
  viewport.addEventListener('pointermove', (e) => {
    if (!drag) return;
    const dx = e.clientX - drag.x; const dy = e.clientY - drag.y;
    drag.moved += Math.abs(dx) + Math.abs(dy);
    drag.x = e.clientX; drag.y = e.clientY;
    panBy(dx, dy);
  });
  viewport.addEventListener('pointerup', (e) => {
    if (drag && drag.moved < 4 && onClick) {
      const r = viewport.getBoundingClientRect();
      onClick(Math.floor((e.clientX - r.left - view.x) / view.scale), Math.floor((e.clientY - r.top - view.y) / view.scale));
    }
    drag = null;
  });
  viewport.addEventListener('keydown', (e) => {
    const r = viewport.getBoundingClientRect();
    const step = 40;
    const keys = {
      '+': () => zoomAt(1.25, r.width / 2, r.height / 2), '=': () => zoomAt(1.25, r.width / 2, r.height / 2),
      '-': () => zoomAt(0.8, r.width / 2, r.height / 2), '1': () => pixelForPixel(viewport), '0': () => fit(viewport),
      ArrowLeft: () => panBy(step, 0), ArrowRight: () => panBy(-step, 0),
      ArrowUp: () => panBy(0, step), ArrowDown: () => panBy(0, -step),
    };
    if (keys[e.key]) { e.preventDefault(); keys[e.key](); }
  });
}
