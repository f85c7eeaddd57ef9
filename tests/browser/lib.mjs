// Shared set-up for grove's browser tests: Debian's Chromium, headless, with an empty
// profile and nothing that talks to the network on its own.
import { chromium } from 'playwright-core';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { spawn } from 'node:child_process';

export const CHROMIUM = process.env.GROVE_CHROMIUM || '/usr/bin/chromium';
export const FLAGS = [
  '--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run',
  '--disable-background-networking', '--disable-component-update', '--disable-sync',
];

/** A browser context on a fresh, empty --user-data-dir. */
export async function launch(viewport = { width: 1200, height: 760 }) {
  const profile = mkdtempSync(join(tmpdir(), 'grove-chromium-'));
  return chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM, headless: true, args: FLAGS, viewport,
  });
}

/** `grove label DATA` as a child process, and the URL with the token it prints. */
export function startServer(grove, data) {
  const p = spawn(grove, ['label', data], { stdio: ['ignore', 'pipe', 'inherit'] });
  const url = new Promise((resolve, reject) => {
    let text = '';
    p.stdout.on('data', (d) => { text += d; const m = text.match(/http:\/\/\S+token=\w+/); if (m) resolve(m[0]); });
    p.on('exit', (c) => reject(new Error(`grove label exited with ${c}: ${text}`)));
  });
  return { p, url };
}

/** What a user does in the workspace page, through its own view transform and controls. */
export function workspaceActions(page) {
  // Image coordinates → page coordinates.
  async function toPage(x, y) {
    const v = await page.evaluate(() => ({ ...S.view }));
    const box = await page.locator('#view').boundingBox();
    return [box.x + v.ox + x * v.scale, box.y + v.oy + y * v.scale];
  }
  // A stroke {class, size, points: [[x, y], …]} painted with the mouse (class by its key).
  async function paintStroke(s) {
    await page.keyboard.press(String(s.class + 1));
    await page.evaluate((size) => { const r = document.getElementById('brush-size'); r.value = String(size); r.dispatchEvent(new Event('input')); }, s.size);
    const pts = [];
    for (const [x, y] of s.points) pts.push(await toPage(x + 0.5, y + 0.5));
    await page.mouse.move(pts[0][0], pts[0][1]);
    await page.mouse.down();
    for (let k = 1; k < pts.length; k++) await page.mouse.move(pts[k][0], pts[k][1], { steps: 6 });
    await page.mouse.up();
  }
  async function openImage(name) {
    await page.locator(`#image-list li[data-name="${name}"]`).click();
    await page.waitForFunction((n) => S.img && S.img.name === n, name);
  }
  async function addClass(c) {
    await page.fill('#class-name', c.name);
    await page.fill('#class-colour', c.color);
    await page.click('#class-add button');
    await page.waitForFunction((n) => S.classes.some((k) => k.name === n), c.name);
  }
  const saved = () => page.waitForFunction(() => document.getElementById('save-state').dataset.state === 'saved' && !S.img.dirty);
  // Brush handler and frame times (ms) the page recorded since `resetStats`.
  const resetStats = () => page.evaluate(() => { groveStats.stroke.length = 0; groveStats.frame.length = 0; });
  const stats = () => page.evaluate(() => {
    const q = (a, p) => { const s = [...a].sort((x, y) => x - y); return s.length ? s[Math.min(s.length - 1, Math.floor(p * s.length))] : null; };
    return { strokes: groveStats.stroke.length, stroke_p50: q(groveStats.stroke, 0.5), stroke_p95: q(groveStats.stroke, 0.95), stroke_max: Math.max(...groveStats.stroke), frames: groveStats.frame.length, frame_p50: q(groveStats.frame, 0.5), frame_p95: q(groveStats.frame, 0.95) };
  });
  return { toPage, paintStroke, openImage, addClass, saved, resetStats, stats };
}
