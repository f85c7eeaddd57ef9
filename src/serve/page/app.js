// grove workspace page. Plain JS, no libraries, nothing fetched but the local server's API.
// Every text that comes from the dataset (image and class names) goes into the page through
// textContent or input values, never as HTML.
'use strict';

const UNLABELLED = 255;
const $ = (id) => document.getElementById(id);

const S = {
  classes: [],          // [{index, id, name, color}]
  classesReady: false,
  images: [],           // from /api/state
  model: null,
  img: null,            // the open image: {name, w, h, tile, levels, labels, version, ...}
  tool: 'paint',
  cls: 0,
  size: 14,
  opacity: 0.7,
  view: { scale: 1, ox: 0, oy: 0 },
  tiles: new Map(),     // "name/level/x/y" -> {img, ok}
  layers: { list: [], regions: [], gen: null, areas: [] },
  layerView: {
    prediction: { on: true, alpha: 0.55 },
    smoothed: { on: false, alpha: 0.55 },
    uncertainty: { on: false, alpha: 0.8 },
    regions: { on: true, alpha: 1 },
  },
  regionCursor: -1,
  training: false,      // a training is running (its model is not there yet)
  reviewing: null,      // after a training: {stage, done, total} of the ranking / cross-validation
  ranked: 0,            // images ranked by the current model
};

// Timings the browser tests read: stroke handler and frame draw, in ms.
window.groveStats = { stroke: [], frame: [], saves: 0, errors: [] };

// ---------- small helpers ----------
function el(tag, props = {}, ...children) {
  const e = document.createElement(tag);
  for (const [k, v] of Object.entries(props)) {
    if (k === 'text') e.textContent = v;
    else if (k === 'class') e.className = v;
    else if (k === 'style') Object.assign(e.style, v);
    else if (k.startsWith('on')) e.addEventListener(k.slice(2), v);
    else e.setAttribute(k, v);
  }
  for (const c of children) if (c) e.appendChild(c);
  return e;
}

function say(text) { $('message').textContent = text || ''; }

async function api(path, opts = {}) {
  const r = await fetch(path, { credentials: 'same-origin', ...opts });
  return r;
}

async function apiJson(path, opts = {}) {
  const r = await api(path, opts);
  let body = null;
  try { body = await r.json(); } catch (_) { body = null; }
  if (!r.ok) throw new Error((body && body.error) || `${path}: HTTP ${r.status}`);
  return body;
}

function enc(name) { return encodeURIComponent(name); }

function hexToRgb(hex) {
  const n = parseInt(hex.slice(1), 16);
  return [(n >> 16) & 255, (n >> 8) & 255, n & 255];
}

// Label maps travel as runs of (value u8, length u32 LE); see src/serve/rle.rs.
function rleEncode(values) {
  let out = new Uint8Array(4096);
  let o = 0;
  let i = 0;
  while (i < values.length) {
    const v = values[i];
    let j = i + 1;
    while (j < values.length && values[j] === v) j++;
    if (o + 5 > out.length) { const b = new Uint8Array(out.length * 2); b.set(out); out = b; }
    const len = j - i;
    out[o] = v; out[o + 1] = len & 255; out[o + 2] = (len >>> 8) & 255;
    out[o + 3] = (len >>> 16) & 255; out[o + 4] = (len >>> 24) & 255;
    o += 5; i = j;
  }
  return out.subarray(0, o);
}

function rleDecode(bytes, n) {
  const out = new Uint8Array(n);
  let p = 0;
  for (let i = 0; i + 4 < bytes.length; i += 5) {
    const len = bytes[i + 1] | (bytes[i + 2] << 8) | (bytes[i + 3] << 16) | (bytes[i + 4] << 24);
    out.fill(bytes[i], p, p + (len >>> 0));
    p += len >>> 0;
  }
  if (p !== n) throw new Error(`label data covers ${p} of ${n} pixels`);
  return out;
}

// ---------- state from the server ----------
async function refreshState() {
  const st = await apiJson('/api/state');
  S.classes = st.classes;
  S.classesReady = st.classes_ready;
  S.images = st.images;
  S.model = st.model;
  S.ranked = st.ranked || 0;
  if (st.train && st.train.smoothing) S.smoothing = st.train.smoothing;
  $('dataset').textContent = st.dataset || '';
  renderImageList();
  renderClasses();
  renderModel();
  if (st.train && (st.train.state === 'running' || (st.train.state === 'done' && st.train.background)) && !S.polling) pollTraining();
  renderLayers();
  return st;
}

function classColour(index) {
  const c = S.classes[index];
  return c ? hexToRgb(c.color) : [255, 0, 255];
}

function renderImageList() {
  const list = $('image-list');
  list.replaceChildren();
  S.images.forEach((im) => {
    const counts = im.labelled || [];
    const total = counts.reduce((a, b) => a + b, 0);
    const perClass = counts.map((c, i) => (c && S.classes[i] ? `${S.classes[i].name} ${c.toLocaleString()}` : null)).filter(Boolean);
    const bars = el('div', { class: 'bars', title: perClass.length ? `labelled pixels: ${perClass.join(', ')}` : 'no labelled pixels' });
    if (total > 0) {
      counts.forEach((c, i) => {
        if (!c || !S.classes[i]) return;
        bars.appendChild(el('span', { style: { width: `${(100 * c) / total}%`, background: S.classes[i].color } }));
      });
    }
    const meta = [el('span', { class: 'px', text: total > 0 ? `${total.toLocaleString()} px labelled` : 'not labelled' })];
    // The held-out score of the last cross-validation: of an older model once retrained.
    if (im.score != null) {
      meta.push(el('span', {
        class: im.score_current ? 'score' : 'score stale',
        text: `held-out IoU ${im.score.toFixed(2)}${im.score_current ? '' : ' (older model)'}`,
        title: 'mean IoU of this image, scored by a cross-validation model trained without it',
      }));
    }
    if (im.rank != null) {
      meta.push(el('span', { class: 'rank', text: `suggested #${im.rank} of ${S.ranked}`, title: 'rank by what labelling this image could settle, as grove suggest ranks it' }));
    }
    const metaLine = el('span', { class: 'meta' });
    meta.forEach((m, k) => { if (k) metaLine.appendChild(document.createTextNode(' · ')); metaLine.appendChild(m); });
    const li = el('li', { 'data-name': im.name, onclick: () => openImage(im.name) },
      el('span', { class: 'name', text: im.name, title: im.name }),
      metaLine,
      bars);
    if (S.img && S.img.name === im.name) li.classList.add('current');
    list.appendChild(li);
  });
}

function currentCounts() {
  if (!S.img) return [];
  const counts = new Array(S.classes.length).fill(0);
  const L = S.img.labels;
  for (let i = 0; i < L.length; i++) if (L[i] !== UNLABELLED && L[i] < counts.length) counts[L[i]]++;
  return counts;
}

function renderClasses() {
  const list = $('class-list');
  list.replaceChildren();
  const counts = currentCounts();
  S.classes.forEach((c, i) => {
    const name = el('input', { class: 'cname', 'aria-label': `name of class ${i + 1}` });
    name.value = c.name;
    name.addEventListener('change', () => editClass(i, { name: name.value }));
    name.addEventListener('keydown', (e) => { if (e.key === 'Enter') name.blur(); e.stopPropagation(); });
    const swatch = el('input', { type: 'color', class: 'swatch', 'aria-label': `colour of ${c.name}` });
    swatch.value = c.color;
    swatch.addEventListener('change', () => editClass(i, { color: swatch.value }));
    const li = el('li', { 'data-index': String(i), onclick: (e) => { if (e.target === li || e.target.classList.contains('key')) selectClass(i); } },
      el('span', { class: 'key', text: i < 9 ? String(i + 1) : '' }),
      swatch, name,
      el('span', { class: 'count', text: counts[i] ? counts[i].toLocaleString() : '' }));
    li.addEventListener('mousedown', () => selectClass(i));
    if (i === S.cls) li.classList.add('active');
    list.appendChild(li);
  });
  if (!S.classesReady) {
    list.appendChild(el('li', { class: 'hint', text: 'Add at least two classes to start painting.' }));
  }
}

function selectClass(i) {
  if (i >= S.classes.length) return;
  S.cls = i;
  setTool('paint');
  document.querySelectorAll('#class-list li[data-index]').forEach((li) => {
    li.classList.toggle('active', Number(li.dataset.index) === i);
  });
}

async function putClasses(classes) {
  try {
    const r = await apiJson('/api/classes', {
      method: 'PUT', headers: { 'Content-Type': 'application/json' },
      body: JSON.stringify({ classes: classes.map((c) => ({ id: c.id, name: c.name, color: c.color })) }),
    });
    S.classes = r.classes;
    S.classesReady = r.classes_ready;
    say('');
  } catch (e) {
    say(e.message);
  }
  renderClasses();
  repaintAllLabels();
  renderImageList();
}

function editClass(i, change) {
  const next = S.classes.map((c) => ({ ...c }));
  Object.assign(next[i], change);
  putClasses(next);
}

// ---------- the open image ----------
async function openImage(name) {
  await flushSave();
  if (S.img && S.img.dirty) {
    say('the labels of this image are not saved yet; try again in a moment');
    return;
  }
  say('');
  const info = await apiJson(`/api/images/${enc(name)}`);
  const r = await api(`/api/labels/${enc(name)}`);
  if (!r.ok) {
    let m = `cannot load labels (${r.status})`;
    try { m = (await r.json()).error; } catch (_) { /* keep the status */ }
    say(m);
    return;
  }
  const w = info.width, h = info.height;
  const labels = rleDecode(new Uint8Array(await r.arrayBuffer()), w * h);
  const canvas = document.createElement('canvas');
  canvas.width = w; canvas.height = h;
  const lctx = canvas.getContext('2d');
  // A reduced copy of the labels for zoomed-out views: scaling the full-size label canvas
  // down every frame is what made pans slow on large images.
  let pf = 1;
  while (Math.max(w, h) / pf > 1024) pf *= 2;
  const preview = document.createElement('canvas');
  preview.width = Math.ceil(w / pf); preview.height = Math.ceil(h / pf);
  const pctx = preview.getContext('2d');
  pctx.imageSmoothingEnabled = false;
  S.img = {
    name, w, h, tile: info.tile, levels: info.levels, labels,
    version: (r.headers.get('ETag') || '"none"').replace(/"/g, ''),
    canvas, lctx, data: lctx.createImageData(w, h), preview, pctx, pf,
    marks: new Uint16Array(w * h), markGen: 0,
    undo: [], redo: [], stroke: null, dirty: false, edits: 0, saving: null, conflict: false,
    layerImgs: {},
  };
  S.layers = { list: [], regions: [], gen: null, areas: [] };
  S.regionCursor = -1;
  repaintAllLabels();
  $('image-title').textContent = name;
  $('empty-note').hidden = true;
  $('conflict').hidden = true;
  setSaveState('saved');
  fitView();
  renderImageList();
  renderClasses();
  renderAreas();
  renderLayers();
  if (S.model) S.img.layersLoading = loadLayers();
}

function repaintAllLabels() {
  const im = S.img;
  if (!im) return;
  paintRect(0, 0, im.w, im.h);
  requestDraw();
}

// Copies the labels of a rectangle into the label canvas (class colours, unlabelled clear).
function paintRect(x0, y0, x1, y1) {
  const im = S.img;
  x0 = Math.max(0, x0 | 0); y0 = Math.max(0, y0 | 0);
  x1 = Math.min(im.w, Math.ceil(x1)); y1 = Math.min(im.h, Math.ceil(y1));
  if (x1 <= x0 || y1 <= y0) return;
  const cols = S.classes.map((c) => hexToRgb(c.color));
  const d = im.data.data, L = im.labels;
  for (let y = y0; y < y1; y++) {
    let i = y * im.w + x0;
    let p = i * 4;
    for (let x = x0; x < x1; x++, i++, p += 4) {
      const v = L[i];
      if (v === UNLABELLED || v >= cols.length) { d[p + 3] = 0; continue; }
      const c = cols[v];
      d[p] = c[0]; d[p + 1] = c[1]; d[p + 2] = c[2]; d[p + 3] = 255;
    }
  }
  im.lctx.putImageData(im.data, 0, 0, x0, y0, x1 - x0, y1 - y0);
  if (im.pf > 1) {
    const f = im.pf;
    const px0 = Math.floor(x0 / f), py0 = Math.floor(y0 / f);
    const px1 = Math.ceil(x1 / f), py1 = Math.ceil(y1 / f);
    im.pctx.clearRect(px0, py0, px1 - px0, py1 - py0);
    im.pctx.drawImage(im.canvas, px0 * f, py0 * f, (px1 - px0) * f, (py1 - py0) * f, px0, py0, px1 - px0, py1 - py0);
  }
}

// ---------- view ----------
const view = $('view');
const ctx = view.getContext('2d');
let drawPending = false;

function resizeCanvas() {
  const dpr = window.devicePixelRatio || 1;
  const r = view.getBoundingClientRect();
  view.width = Math.max(1, Math.round(r.width * dpr));
  view.height = Math.max(1, Math.round(r.height * dpr));
  requestDraw();
}

function fitView() {
  if (!S.img) return;
  const r = view.getBoundingClientRect();
  const s = Math.min(r.width / S.img.w, r.height / S.img.h) * 0.96;
  S.view.scale = s;
  S.view.ox = (r.width - S.img.w * s) / 2;
  S.view.oy = (r.height - S.img.h * s) / 2;
  requestDraw();
}

function requestDraw() {
  if (drawPending) return;
  drawPending = true;
  requestAnimationFrame(() => { drawPending = false; draw(); });
}

function tileImage(level, tx, ty) {
  const im = S.img;
  const key = `${im.name}/${level}/${tx}/${ty}`;
  let t = S.tiles.get(key);
  if (!t) {
    const img = new Image();
    t = { img, ok: false };
    img.onload = () => { t.ok = true; requestDraw(); };
    img.onerror = () => { t.failed = true; };
    img.src = `/api/images/${enc(im.name)}/tiles/${level}/${tx}/${ty}`;
    S.tiles.set(key, t);
    if (S.tiles.size > 600) S.tiles.delete(S.tiles.keys().next().value);
  }
  return t;
}

// Draws the image from the pyramid level matching the zoom, coarser tiles standing in for
// those still loading; then the layers, the labels and the suggested regions.
function draw() {
  const t0 = performance.now();
  const dpr = window.devicePixelRatio || 1;
  ctx.setTransform(1, 0, 0, 1, 0, 0);
  ctx.clearRect(0, 0, view.width, view.height);
  const im = S.img;
  if (!im) return;
  const { scale, ox, oy } = S.view;
  ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
  ctx.imageSmoothingEnabled = scale < 1;
  const cw = view.width / dpr, ch = view.height / dpr;
  // Visible part of the image, in image pixels.
  const vx0 = Math.max(0, -ox / scale), vy0 = Math.max(0, -oy / scale);
  const vx1 = Math.min(im.w, (cw - ox) / scale), vy1 = Math.min(im.h, (ch - oy) / scale);
  if (vx1 <= vx0 || vy1 <= vy0) return;
  const want = Math.max(0, Math.min(im.levels.length - 1, Math.floor(Math.log2(1 / (scale * dpr)))));
  const drawLevel = (level, x0, y0, x1, y1, fallback) => {
    const f = 2 ** level, span = im.tile * f;
    for (let ty = Math.floor(y0 / span); ty * span < y1; ty++) {
      for (let tx = Math.floor(x0 / span); tx * span < x1; tx++) {
        const t = tileImage(level, tx, ty);
        const X = tx * span, Y = ty * span;
        if (t.ok) {
          ctx.drawImage(t.img, ox + X * scale, oy + Y * scale, t.img.width * f * scale, t.img.height * f * scale);
        } else if (fallback && level + 1 < im.levels.length) {
          drawLevel(level + 1, Math.max(x0, X), Math.max(y0, Y), Math.min(x1, X + span), Math.min(y1, Y + span), false);
        }
      }
    }
  };
  drawLevel(want, vx0, vy0, vx1, vy1, true);
  // Full-size layers (prediction, uncertainty): only their visible part is scaled.
  const sx0 = Math.floor(vx0), sy0 = Math.floor(vy0);
  const sw = Math.ceil(vx1) - sx0, sh = Math.ceil(vy1) - sy0;
  const blit = (source, alpha, f = 1) => {
    ctx.globalAlpha = alpha;
    const a = Math.floor(sx0 / f), b = Math.floor(sy0 / f);
    const c = Math.min(source.width, Math.ceil((sx0 + sw) / f)) - a, d = Math.min(source.height, Math.ceil((sy0 + sh) / f)) - b;
    ctx.drawImage(source, a, b, c, d, ox + a * f * scale, oy + b * f * scale, c * f * scale, d * f * scale);
    ctx.globalAlpha = 1;
  };
  for (const kind of ['prediction', 'smoothed', 'uncertainty']) {
    const lv = S.layerView[kind], img = im.layerImgs[kind];
    if (lv.on && img && img.complete && img.naturalWidth) blit(img, lv.alpha);
  }
  if (S.opacity > 0) {
    const usePreview = im.pf > 1 && scale * dpr * im.pf <= 1.5;
    blit(usePreview ? im.preview : im.canvas, S.opacity, usePreview ? im.pf : 1);
  }
  if (S.layers.gen != null && layersStale()) {
    ctx.font = '13px "DejaVu Sans", sans-serif';
    const note = S.training ? 'layers of the previous model: retraining…' : 'layers of the previous model: reloading…';
    ctx.fillStyle = 'rgba(40, 30, 0, 0.75)';
    ctx.fillRect(8, 8, ctx.measureText(note).width + 16, 24);
    ctx.fillStyle = '#ffd76a';
    ctx.fillText(note, 16, 25);
  }
  if (S.layerView.regions.on) {
    ctx.lineWidth = 2;
    const grey = regionsStale();
    S.layers.regions.forEach((r, k) => {
      ctx.strokeStyle = grey ? '#b8b8b8' : k === S.regionCursor ? '#ffe14d' : '#ff4fd8';
      ctx.setLineDash(k === S.regionCursor ? [] : [6, 4]);
      ctx.strokeRect(ox + r.x * scale, oy + r.y * scale, r.width * scale, r.height * scale);
      ctx.setLineDash([]);
      ctx.fillStyle = ctx.strokeStyle;
      ctx.font = '12px "DejaVu Sans", sans-serif';
      ctx.fillText(`#${k + 1}`, ox + r.x * scale + 3, oy + r.y * scale - 4);
    });
  }
  if (cursor.inside && !panning) {
    ctx.strokeStyle = S.tool === 'erase' ? '#ffffff' : S.classes[S.cls] ? S.classes[S.cls].color : '#fff';
    ctx.lineWidth = 1.5;
    ctx.beginPath();
    ctx.arc(cursor.x, cursor.y, Math.max(1, (S.size / 2) * scale), 0, 2 * Math.PI);
    ctx.stroke();
  }
  window.groveStats.frame.push(performance.now() - t0);
  if (window.groveStats.frame.length > 500) window.groveStats.frame.shift();
}

// ---------- painting ----------
const cursor = { x: 0, y: 0, inside: false };
let panning = null;
let spaceHeld = false;

function toImage(e) {
  const r = view.getBoundingClientRect();
  const sx = e.clientX - r.left, sy = e.clientY - r.top;
  return { sx, sy, x: (sx - S.view.ox) / S.view.scale, y: (sy - S.view.oy) / S.view.scale };
}

function canPaint() {
  if (!S.img) return false;
  if (!S.classesReady) { say('Add at least two classes first (right panel).'); return false; }
  if (S.img.conflict) { say('Resolve the save conflict first (banner above the image).'); return false; }
  return true;
}

// Sets every pixel of the disc at (cx, cy) to the stroke's value, remembering old values
// once per stroke for undo. Returns the touched rectangle.
function stamp(cx, cy) {
  const im = S.img, st = im.stroke;
  const r = S.size / 2;
  const x0 = Math.max(0, Math.floor(cx - r)), x1 = Math.min(im.w - 1, Math.ceil(cx + r));
  const y0 = Math.max(0, Math.floor(cy - r)), y1 = Math.min(im.h - 1, Math.ceil(cy + r));
  const r2 = r * r, L = im.labels, M = im.marks, g = im.markGen, v = st.value;
  for (let y = y0; y <= y1; y++) {
    const dy = y + 0.5 - cy;
    for (let x = x0; x <= x1; x++) {
      const dx = x + 0.5 - cx;
      if (dx * dx + dy * dy > r2 && !(r < 1 && x === Math.floor(cx) && y === Math.floor(cy))) continue;
      const i = y * im.w + x;
      if (L[i] === v) continue;
      if (M[i] !== g) { M[i] = g; st.idx.push(i); st.old.push(L[i]); }
      L[i] = v;
    }
  }
  return [x0, y0, x1 + 1, y1 + 1];
}

function strokeTo(p) {
  const t0 = performance.now();
  const st = S.img.stroke;
  const dx = p.x - st.lx, dy = p.y - st.ly;
  const steps = Math.max(1, Math.ceil(Math.hypot(dx, dy) / Math.max(0.5, S.size / 4)));
  let bx0 = Infinity, by0 = Infinity, bx1 = -Infinity, by1 = -Infinity;
  for (let k = 1; k <= steps; k++) {
    const [a, b, c, d] = stamp(st.lx + (dx * k) / steps, st.ly + (dy * k) / steps);
    bx0 = Math.min(bx0, a); by0 = Math.min(by0, b); bx1 = Math.max(bx1, c); by1 = Math.max(by1, d);
  }
  st.lx = p.x; st.ly = p.y;
  paintRect(bx0, by0, bx1, by1);
  requestDraw();
  window.groveStats.stroke.push(performance.now() - t0);
  if (window.groveStats.stroke.length > 2000) window.groveStats.stroke.shift();
}

function beginStroke(p) {
  const im = S.img;
  im.markGen = (im.markGen + 1) & 0xffff;
  if (im.markGen === 0) { im.marks.fill(0); im.markGen = 1; }
  im.stroke = { value: S.tool === 'erase' ? UNLABELLED : S.cls, idx: [], old: [], lx: p.x, ly: p.y };
  const t0 = performance.now();
  const [a, b, c, d] = stamp(p.x, p.y);
  paintRect(a, b, c, d);
  requestDraw();
  window.groveStats.stroke.push(performance.now() - t0);
}

function endStroke() {
  const im = S.img;
  const st = im.stroke;
  im.stroke = null;
  if (!st || st.idx.length === 0) return;
  im.undo.push({ idx: Int32Array.from(st.idx), old: Uint8Array.from(st.old), value: st.value });
  if (im.undo.length > 200) im.undo.shift();
  im.redo = [];
  changed();
}

// Undo restores the old values; redo writes the stroke's value again.
function undoRedo(from, to, restoreOld) {
  const im = S.img;
  if (!im || !from.length) return;
  const op = from.pop();
  let x0 = Infinity, y0 = Infinity, x1 = -1, y1 = -1;
  for (let k = 0; k < op.idx.length; k++) {
    const i = op.idx[k];
    im.labels[i] = restoreOld ? op.old[k] : op.value;
    const x = i % im.w, y = (i / im.w) | 0;
    if (x < x0) x0 = x; if (x > x1) x1 = x; if (y < y0) y0 = y; if (y > y1) y1 = y;
  }
  to.push(op);
  paintRect(x0, y0, x1 + 1, y1 + 1);
  requestDraw();
  changed();
}

function changed() {
  const im = S.img;
  im.dirty = true;
  im.edits++;
  setSaveState('unsaved');
  scheduleSave();
  renderClasses();
  if (S.layers.gen != null && S.layers.edits === im.edits - 1) renderLayers(); // regions now stale
}

view.addEventListener('contextmenu', (e) => e.preventDefault());
view.addEventListener('pointerdown', (e) => {
  if (!S.img) return;
  view.focus();
  const p = toImage(e);
  if (e.button === 1 || e.button === 2 || spaceHeld) {
    panning = { sx: p.sx, sy: p.sy, ox: S.view.ox, oy: S.view.oy };
    view.setPointerCapture(e.pointerId);
    return;
  }
  if (e.button !== 0 || !canPaint()) return;
  view.setPointerCapture(e.pointerId);
  beginStroke(p);
});
view.addEventListener('pointermove', (e) => {
  const p = toImage(e);
  cursor.x = p.sx; cursor.y = p.sy; cursor.inside = true;
  if (panning) {
    S.view.ox = panning.ox + (p.sx - panning.sx);
    S.view.oy = panning.oy + (p.sy - panning.sy);
    requestDraw();
    return;
  }
  if (S.img && S.img.stroke) {
    // Coalesced events keep fast strokes continuous without a draw per raw event.
    const events = e.getCoalescedEvents ? e.getCoalescedEvents() : [];
    if (events.length > 1) for (const ce of events) strokeTo(toImage(ce)); else strokeTo(p);
  } else {
    requestDraw();
  }
});
const stopPointer = () => {
  if (panning) { panning = null; return; }
  if (S.img && S.img.stroke) endStroke();
};
view.addEventListener('pointerup', stopPointer);
view.addEventListener('pointercancel', stopPointer);
view.addEventListener('pointerleave', () => { cursor.inside = false; requestDraw(); });
view.addEventListener('wheel', (e) => {
  if (!S.img) return;
  e.preventDefault();
  const p = toImage(e);
  const f = Math.exp(-e.deltaY * 0.0015);
  const s = Math.min(64, Math.max(0.01, S.view.scale * f));
  S.view.ox = p.sx - p.x * s;
  S.view.oy = p.sy - p.y * s;
  S.view.scale = s;
  requestDraw();
}, { passive: false });

// ---------- saving ----------
let saveTimer = null;

function setSaveState(s) {
  const t = { saved: 'all changes saved', unsaved: 'unsaved changes…', saving: 'saving…', offline: 'not saved: server unreachable, retrying', conflict: 'not saved: conflict' }[s] || s;
  $('save-state').textContent = t;
  $('save-state').dataset.state = s;
}

function scheduleSave(delay = 600) {
  clearTimeout(saveTimer);
  saveTimer = setTimeout(() => { saveNow(); }, delay);
}

async function saveNow(force = false) {
  const im = S.img;
  if (!im || (!im.dirty && !force) || im.conflict) return;
  if (im.saving) { await im.saving; if (im.dirty) return saveNow(); return; }
  const edits = im.edits;
  const body = rleEncode(im.labels);
  setSaveState('saving');
  im.saving = (async () => {
    try {
      const r = await api(`/api/labels/${enc(im.name)}`, {
        method: 'PUT', headers: { 'If-Match': `"${im.version}"`, 'Content-Type': 'application/octet-stream' }, body,
      });
      const j = await r.json().catch(() => ({}));
      if (r.status === 409) {
        im.conflict = true;
        im.conflictVersion = j.current;
        $('conflict-text').textContent = j.error || 'saved elsewhere in the meantime';
        $('conflict').hidden = false;
        setSaveState('conflict');
        return;
      }
      if (!r.ok) throw new Error(j.error || `HTTP ${r.status}`);
      im.version = j.version;
      window.groveStats.saves++;
      if (im.edits === edits) { im.dirty = false; setSaveState('saved'); }
      const entry = S.images.find((x) => x.name === im.name);
      if (entry) { entry.labelled = j.labelled; renderImageList(); }
    } catch (e) {
      setSaveState('offline');
      scheduleSave(2000);
    }
  })();
  await im.saving;
  im.saving = null;
  if (im.dirty && !im.conflict) scheduleSave();
}

async function flushSave() {
  clearTimeout(saveTimer);
  if (S.img && (S.img.dirty || S.img.saving)) await saveNow();
}

$('conflict-reload').addEventListener('click', async () => {
  if (!S.img) return;
  const name = S.img.name;
  S.img.dirty = false; S.img.conflict = false;
  await openImage(name);
});
$('conflict-keep').addEventListener('click', async () => {
  const im = S.img;
  if (!im) return;
  im.version = im.conflictVersion;
  im.conflict = false;
  $('conflict').hidden = true;
  await saveNow(true);
});

// Closing the tab: send what is unsaved with a keepalive request (small scribble maps fit
// its 64 kB), and ask the browser to warn when that is not enough.
function lastChanceSave() {
  const im = S.img;
  if (!im || !im.dirty || im.conflict) return;
  const body = rleEncode(im.labels);
  if (body.length < 60000) {
    fetch(`/api/labels/${enc(im.name)}`, {
      method: 'PUT', keepalive: true, credentials: 'same-origin',
      headers: { 'If-Match': `"${im.version}"` }, body,
    }).catch(() => {});
  }
}
window.addEventListener('pagehide', lastChanceSave);
document.addEventListener('visibilitychange', () => { if (document.visibilityState === 'hidden') lastChanceSave(); });
window.addEventListener('beforeunload', (e) => {
  if (S.img && (S.img.dirty || S.img.saving)) { e.preventDefault(); e.returnValue = ''; }
});

// ---------- tools and keys ----------
function setTool(t) {
  S.tool = t;
  $('tool-paint').setAttribute('aria-pressed', String(t === 'paint'));
  $('tool-erase').setAttribute('aria-pressed', String(t === 'erase'));
}
function setSize(v) {
  S.size = Math.max(1, Math.min(120, Math.round(v)));
  $('brush-size').value = String(S.size);
  $('brush-size-value').textContent = String(S.size);
  requestDraw();
}
$('tool-paint').addEventListener('click', () => setTool('paint'));
$('tool-erase').addEventListener('click', () => setTool('erase'));
$('undo').addEventListener('click', () => S.img && undoRedo(S.img.undo, S.img.redo, true));
$('redo').addEventListener('click', () => S.img && undoRedo(S.img.redo, S.img.undo, false));
$('brush-size').addEventListener('input', (e) => setSize(Number(e.target.value)));
$('label-opacity').addEventListener('input', (e) => { S.opacity = Number(e.target.value) / 100; requestDraw(); });

$('class-add').addEventListener('submit', (e) => {
  e.preventDefault();
  const name = $('class-name').value.trim();
  if (!name) { say('Type a class name first.'); return; }
  const next = S.classes.map((c) => ({ ...c }));
  next.push({ name, color: $('class-colour').value });
  $('class-name').value = '';
  // Suggest a different colour for the next class.
  const hue = (next.length * 137) % 360;
  $('class-colour').value = hslToHex(hue, 0.6, 0.5);
  putClasses(next);
});
$('class-name').addEventListener('keydown', (e) => e.stopPropagation());

function hslToHex(h, s, l) {
  const a = s * Math.min(l, 1 - l);
  const f = (n) => {
    const k = (n + h / 30) % 12;
    const c = l - a * Math.max(-1, Math.min(k - 3, 9 - k, 1));
    return Math.round(255 * c).toString(16).padStart(2, '0');
  };
  return `#${f(0)}${f(8)}${f(4)}`;
}

document.addEventListener('keydown', (e) => {
  if (e.target instanceof HTMLInputElement) return;
  if (e.key === ' ') { spaceHeld = true; e.preventDefault(); return; }
  const mod = e.ctrlKey || e.metaKey;
  if (mod && (e.key === 'z' || e.key === 'Z')) {
    e.preventDefault();
    if (!S.img) return;
    if (e.shiftKey) undoRedo(S.img.redo, S.img.undo, false); else undoRedo(S.img.undo, S.img.redo, true);
    return;
  }
  if (mod && e.key === 'y') { e.preventDefault(); if (S.img) undoRedo(S.img.redo, S.img.undo, false); return; }
  if (mod) return;
  if (/^[1-9]$/.test(e.key)) { selectClass(Number(e.key) - 1); return; }
  switch (e.key) {
    case 'b': setTool('paint'); break;
    case 'e': setTool('erase'); break;
    case '[': setSize(S.size / 1.25); break;
    case ']': setSize(S.size * 1.25 + 0.5); break;
    case 'f': fitView(); break;
    case 't': startTraining(); break;
    case 'n': nextRegion(); break;
    case 'p': toggleLayer('prediction'); break;
    case 'u': toggleLayer('uncertainty'); break;
    default: return;
  }
});
document.addEventListener('keyup', (e) => { if (e.key === ' ') spaceHeld = false; });
window.addEventListener('resize', resizeCanvas);

// ---------- training, layers, scores ----------
async function startTraining() {
  if (S.training) return;
  await flushSave();
  try {
    await apiJson('/api/train', { method: 'POST' });
  } catch (e) {
    say(e.message);
    return;
  }
  pollTraining();
}

// Follows a training until its model is there (the layers are then reloaded), and then the
// ranking and cross-validation that run after it until they are done (ranks and held-out
// scores are then refreshed). A new training may be started meanwhile.
async function pollTraining() {
  if (S.polling) return;
  S.polling = true;
  S.training = true;
  $('train').disabled = true;
  $('train-progress').hidden = false;
  renderLayers();
  requestDraw();
  let shownGeneration = S.model ? S.model.generation : null;
  for (;;) {
    let st;
    try { st = await apiJson('/api/train'); } catch (e) { await sleep(1000); continue; }
    if (st.state === 'running') {
      S.training = true;
      $('train').disabled = true;
      const frac = st.total ? st.done / st.total : 0;
      $('train-bar').style.width = `${Math.round(100 * frac)}%`;
      $('train-state').textContent = `training: ${st.stage} ${st.total ? `${st.done}/${st.total}` : ''} (${st.seconds.toFixed(1)} s)`;
      await sleep(300);
      continue;
    }
    S.training = false;
    $('train').disabled = false;
    if (st.state === 'failed') {
      S.reviewing = null;
      $('train-progress').hidden = true;
      $('train-state').textContent = 'training failed';
      say(st.message);
      await refreshState();
      break;
    }
    if (st.state !== 'done') { S.reviewing = null; $('train-progress').hidden = true; break; }
    S.trainedText = `trained on ${st.images} images in ${st.seconds.toFixed(1)} s`;
    S.smoothing = st.smoothing || '';
    if (st.generation !== shownGeneration) {
      shownGeneration = st.generation;
      say('');
      await refreshState();
      if (S.img && S.model) loadLayers();
    }
    const bg = st.background;
    if (bg) {
      S.reviewing = bg;
      $('train-bar').style.width = `${Math.round(100 * (bg.total ? bg.done / bg.total : 0))}%`;
      $('train-state').textContent = `${S.trainedText}; ${bg.stage}${bg.total ? ` ${bg.done}/${bg.total}` : ''}…`;
      await sleep(400);
      continue;
    }
    const wasReviewing = S.reviewing;
    S.reviewing = null;
    $('train-progress').hidden = true;
    $('train-state').textContent = S.trainedText;
    if (wasReviewing) await refreshState();
    break;
  }
  S.polling = false;
  S.training = false;
  renderLayers();
  requestDraw();
}

function sleep(ms) { return new Promise((r) => setTimeout(r, ms)); }

function renderModel() {
  const box = $('scores');
  box.replaceChildren();
  const m = S.model;
  if (!m) { return; }
  if (!S.polling) $('train-state').textContent = S.trainedText || `model: ${m.images} training images`;
  const sc = m.scores || {};
  const t = el('table');
  const row = (k, v) => t.appendChild(el('tr', {}, el('td', { text: k }), el('td', { class: 'num', text: v })));
  if (sc.kind === 'crossval') {
    row(`mean IoU (by image, ${sc.folds} folds)`, `${sc.mean_iou.toFixed(3)} ± ${sc.mean_iou_sd.toFixed(3)}`);
    row('pixel accuracy', sc.pixel_accuracy.toFixed(3));
    for (const [name, v] of Object.entries(sc.per_class_iou || {})) row(`IoU ${name}`, v == null ? '–' : v.toFixed(3));
  } else if (sc.oob_accuracy != null) {
    row('out-of-bag accuracy', sc.oob_accuracy.toFixed(3));
  }
  box.appendChild(t);
  box.dataset.kind = sc.kind || '';
  if (sc.caveat) box.appendChild(el('p', { class: 'caveat', text: sc.caveat }));
  // `grove train`'s statement: the choice shown, the why and the per-strength scores on hover.
  if (S.smoothing) box.appendChild(el('p', { class: 'hint smoothing', text: `smoothing default: ${S.smoothing.split(' (')[0]}`, title: S.smoothing }));
}

async function loadLayers() {
  const im = S.img;
  if (!im) return;
  try {
    const l = await apiJson(`/api/layers/${enc(im.name)}`);
    if (S.img !== im) return;
    S.layers = { list: l.layers, regions: l.regions || [], gen: l.generation, areas: l.areas || [], edits: im.edits };
    for (const kind of l.layers) {
      const img = new Image();
      img.onload = () => requestDraw();
      img.src = `/api/layers/${enc(im.name)}/${kind}.png?g=${l.generation}`;
      im.layerImgs[kind] = img;
    }
    S.regionCursor = -1;
  } catch (e) {
    say(e.message);
  }
  renderLayers();
  renderAreas();
  requestDraw();
}

const LAYER_NAMES = {
  prediction: 'prediction',
  smoothed: 'smoothed prediction',
  uncertainty: 'uncertainty',
  regions: 'suggested regions',
};

function toggleLayer(kind) {
  S.layerView[kind].on = !S.layerView[kind].on;
  renderLayers();
  requestDraw();
}

// Layers are of one model generation: once a training runs or has replaced that model they
// are stale until reloaded, and are marked so (never shown as current).
function layersStale() {
  return S.layers.gen != null && (S.training || !S.model || S.layers.gen !== S.model.generation);
}

// Suggested regions also skip the pixels labelled when they were computed.
function regionsStale() {
  return layersStale() || (S.img && S.layers.edits != null && S.img.edits !== S.layers.edits);
}

function renderLayers() {
  const ul = $('layer-list');
  ul.replaceChildren();
  const stale = layersStale();
  ul.dataset.stale = String(stale);
  if (stale) {
    ul.appendChild(el('li', { class: 'stale-note', text: S.training ? 'of the previous model: retraining…' : 'of the previous model: reloading…' }));
  } else if (S.layers.gen != null && regionsStale()) {
    ul.appendChild(el('li', { class: 'stale-note', text: 'suggested regions predate your latest strokes: retrain to refresh them' }));
  }
  const kinds = [...S.layers.list];
  if (S.layers.regions.length) kinds.push('regions');
  if (!kinds.length) {
    ul.appendChild(el('li', { class: 'hint', text: S.model ? 'open an image to see its layers' : 'train to get layers' }));
  }
  for (const kind of kinds) {
    const lv = S.layerView[kind];
    const box = el('input', { type: 'checkbox', id: `layer-${kind}` });
    box.checked = lv.on;
    box.addEventListener('change', () => { lv.on = box.checked; requestDraw(); });
    const isStale = kind === 'regions' ? regionsStale() : stale;
    const li = el('li', { class: isStale ? 'stale' : '' }, box, el('label', { for: `layer-${kind}`, text: `${LAYER_NAMES[kind] || kind}${isStale ? ' (stale)' : ''}` }));
    if (kind !== 'regions') {
      const a = el('input', { type: 'range', min: '0', max: '100', 'aria-label': `${kind} opacity` });
      a.value = String(Math.round(lv.alpha * 100));
      a.addEventListener('input', () => { lv.alpha = Number(a.value) / 100; requestDraw(); });
      li.appendChild(a);
    }
    ul.appendChild(li);
  }
  $('next-region').disabled = !(S.layers.regions.length > 0 || (S.model && S.images.some((i) => i.rank != null)));
}

function renderAreas() {
  const body = $('areas').tBodies[0];
  body.replaceChildren();
  for (const a of S.layers.areas) {
    const cls = S.classes.find((c) => c.name === a.class);
    const dot = el('span', { class: 'dot', style: { background: cls ? cls.color : '#888' } });
    const name = el('td', {}, dot);
    name.appendChild(document.createTextNode(a.class));
    body.appendChild(el('tr', {}, name, el('td', { class: 'num', text: `${(100 * a.fraction).toFixed(1)} %` })));
  }
}

// The next region `grove suggest` ranks highest: the next one of this image, and after its
// last, the first of the next image in suggestion order (rank 1 first).
async function nextRegion() {
  if (!S.model) return;
  const regs = S.layers.regions;
  if (S.img && S.regionCursor + 1 < regs.length) { showRegion(S.regionCursor + 1); return; }
  const ranked = S.images.filter((i) => i.rank != null).sort((a, b) => a.rank - b.rank);
  if (!ranked.length) { if (regs.length) showRegion(0); return; }
  const here = S.img ? ranked.findIndex((i) => i.name === S.img.name) : -1;
  const next = ranked[(here + 1) % ranked.length];
  if (!S.img || next.name !== S.img.name) {
    await openImage(next.name);
    if (!S.img || S.img.name !== next.name) return;
    await S.img.layersLoading;
  }
  if (S.layers.regions.length) showRegion(0);
  else say(`${next.name}: no region to suggest`);
}

function showRegion(k) {
  const regs = S.layers.regions;
  S.regionCursor = k;
  const r = regs[k];
  const box = view.getBoundingClientRect();
  const s = Math.min(16, Math.min(box.width / r.width, box.height / r.height) * 0.6);
  S.view.scale = s;
  S.view.ox = box.width / 2 - (r.x + r.width / 2) * s;
  S.view.oy = box.height / 2 - (r.y + r.height / 2) * s;
  S.layerView.regions.on = true;
  const rank = (S.images.find((i) => i.name === S.img.name) || {}).rank;
  say(`suggested region ${k + 1} of ${regs.length}${rank != null ? ` in image #${rank}` : ''}${r.classes ? `: ${r.classes.join(' vs ')}` : ''}`);
  renderLayers();
  requestDraw();
}
$('next-region').addEventListener('click', nextRegion);
$('train').addEventListener('click', startTraining);

window.addEventListener('error', (e) => window.groveStats.errors.push(String(e.message)));

// ---------- start ----------
resizeCanvas();
refreshState().then(() => {
  if (!S.classesReady) say('Start by adding classes (right panel), then paint on an image.');
}).catch((e) => say(e.message));
