// The noise panel: what the fit made of the opened image, so a user can see why the strength was
// chosen. A plot of the measured (brightness, noise variance) points with the fitted line (or the
// measured curve, where that was used) per channel, the 8 x 8 noise spectrum of each plane as a small picture, and one sentence.

const CHANNEL_COLOURS = [['#444', 'grey'], ['#c0392b', 'red'], ['#2e8b57', 'green'], ['#2c5aa0', 'blue']];

function plotLevels(canvas, fit) {
  const ctx = canvas.getContext('2d');
  const [W, H, pad] = [canvas.width, canvas.height, 34];
  ctx.clearRect(0, 0, W, H);
  const chans = fit.channels.map((c) => c.level_function);
  const pts = chans.flatMap((f) => f.points);
  if (!pts.length) { ctx.fillStyle = '#444'; ctx.fillText('no smooth areas to measure', pad, H / 2); return; }
  const xMax = Math.max(...pts.map((p) => p.mean)) * 1.05 || 1;
  // The model each channel was evened out with: its measured curve where that was used (held at
  // its ends outside the measured span, as the core holds it), else the straight line.
  const model = fit.channels.map((c) => (c.curve_used ? curveOf(c.level_function) : (x) => c.level_function.slope * x + c.level_function.intercept));
  const samples = Array.from({ length: 49 }, (_, i) => (i / 48) * xMax);
  const yMax = Math.max(...pts.map((p) => p.variance), ...model.flatMap((m) => samples.map(m))) * 1.1 || 1;
  const X = (v) => pad + (v / xMax) * (W - pad - 8);
  const Y = (v) => H - pad + 6 - (v / yMax) * (H - pad - 6);
  ctx.strokeStyle = '#888'; ctx.lineWidth = 1;
  ctx.beginPath(); ctx.moveTo(pad, 4); ctx.lineTo(pad, H - pad + 6); ctx.lineTo(W - 4, H - pad + 6); ctx.stroke();
  ctx.fillStyle = '#333'; ctx.font = '11px sans-serif';
  ctx.fillText('brightness (grey level) →', pad + 4, H - 8);
  ctx.save(); ctx.translate(11, H - pad); ctx.rotate(-Math.PI / 2); ctx.fillText('noise variance →', 0, 0); ctx.restore();
  ctx.fillText(`${Math.round(xMax)}`, W - 40, H - pad + 18);
  ctx.fillText(`${yMax.toPrecision(3)}`, pad + 4, 12);
  chans.forEach((f, i) => {
    const [colour] = CHANNEL_COLOURS[chans.length === 1 ? 0 : i + 1] || CHANNEL_COLOURS[0];
    ctx.strokeStyle = colour; ctx.fillStyle = colour; ctx.lineWidth = 1.5;
    ctx.beginPath();
    samples.forEach((x, j) => (j ? ctx.lineTo : ctx.moveTo).call(ctx, X(x), Y(Math.max(0, model[i](x)))));
    ctx.stroke();
    for (const p of f.points) {
      ctx.beginPath(); ctx.arc(X(p.mean), Y(p.variance), 3, 0, 2 * Math.PI);
      if (p.used) ctx.fill(); else ctx.stroke();
    }
  });
}

// The core's curve_variance: the quadratic over [low, high], held at its ends, floored at a tenth
// of its largest value there.
export function curveOf(f) {
  const [c0, c1, c2] = f.curve;
  const at = (y) => c0 + c1 * y + c2 * y * y;
  let peak = 0;
  for (let i = 0; i <= 16; i += 1) peak = Math.max(peak, at(f.low + ((f.high - f.low) * i) / 16));
  return (y) => Math.max(at(Math.min(Math.max(y, f.low), f.high)), 0.1 * peak, 1e-12);
}

function drawSpectrum(canvas, spectrum) {
  const k = spectrum.k;
  const ctx = canvas.getContext('2d');
  const cell = canvas.width / k;
  const max = Math.max(...spectrum.variances);
  spectrum.variances.forEach((v, i) => {
    const g = Math.round(255 * Math.sqrt(v / max));
    ctx.fillStyle = `rgb(${g},${g},${g})`;
    ctx.fillRect((i % k) * cell, Math.floor(i / k) * cell, cell, cell);
  });
}

export function showNoise(root, fit) {
  root.hidden = false;
  root.querySelector('.noise-model').textContent = `Noise: ${fit.model}.`;
  root.querySelector('.noise-sentence').textContent = fit.sentence + (fit.fallback ? ` Note: ${fit.fallback}.` : '');
  plotLevels(root.querySelector('.noise-levels'), fit);
  const box = root.querySelector('.noise-spectra');
  box.replaceChildren();
  const names = fit.spectra_8.length === 3 ? ['brightness', 'red–blue', 'green–magenta'] : ['grey'];
  fit.spectra_8.forEach((s, i) => {
    if (!s) return;
    const fig = document.createElement('figure');
    const c = document.createElement('canvas');
    c.width = 64; c.height = 64;
    c.setAttribute('role', 'img');
    c.setAttribute('aria-label', `noise spectrum of the ${names[i]} plane`);
    drawSpectrum(c, s);
    const cap = document.createElement('figcaption');
    cap.textContent = `${names[i]}: low/high ${s.ratio.toFixed(1)}`;
    fig.append(c, cap);
    box.append(fig);
  });
  const photon = fit.channels.map((c) => c.photon).filter(Boolean);
  root.querySelector('.noise-photon').textContent = photon.length
    ? photon.map((p, i) => `${photon.length > 1 ? `channel ${i + 1}: ` : ''}gain ${p.gain.toFixed(3)} grey levels per photon, `
      + `black level ${p.offset.toFixed(1)}, read noise ${p.read_noise.toFixed(2)}`).join('; ')
    : '';
}

export function hideNoise(root) { root.hidden = true; }
