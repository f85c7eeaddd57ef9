// The workspace (`grove label`) in headless Chromium, as a user would use it: make the class
// table, paint strokes with the mouse, undo/redo, train, look at the layers and scores, move
// to the next suggested region, correct, retrain, kill and restart the server. Run by
// tests/workspace_browser.rs:  node workspace.mjs GROVE DATA PLAN.json OUTDIR
// It writes OUTDIR/result.json (+ the painted maps) for the Rust side to check against the
// label files on disk, and screenshots OUTDIR/*.png (docs/workspace-*.png with
// GROVE_UPDATE_DOCS=1).
import { readFileSync, writeFileSync, copyFileSync, existsSync, renameSync } from 'node:fs';
import { join } from 'node:path';
import { launch, startServer, workspaceActions } from './lib.mjs';

const [grove, data, planPath, out] = process.argv.slice(2);
const plan = JSON.parse(readFileSync(planPath, 'utf8'));
const docs = process.env.GROVE_UPDATE_DOCS ? join(process.cwd(), '../../docs') : null;
const t0 = Date.now();
const log = (...a) => console.log(`[${((Date.now() - t0) / 1000).toFixed(1)} s]`, ...a);
function check(ok, what) { if (!ok) throw new Error(`check failed: ${what}`); }

const problems = [];
let server = startServer(grove, data);
// A failed check must not leave the server running.
process.on('exit', () => { if (server.p.exitCode === null) server.p.kill(); });
let url = await server.url;
const ctx = await launch({ width: 1180, height: 860 });
const page = ctx.pages()[0] || await ctx.newPage();
let killed = false;
page.on('console', (m) => { if (m.type() === 'error' && !killed) problems.push(`console: ${m.text()}`); });
page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
page.on('dialog', (d) => { problems.push(`dialog opened: ${d.message()} (script injection?)`); d.dismiss(); });

async function shot(name) {
  await page.waitForTimeout(150);
  const path = join(out, `${name}.png`);
  await page.screenshot({ path });
  if (docs && /^workspace-[1235]/.test(name)) copyFileSync(path, join(docs, `${name}.png`));
}
const { paintStroke, openImage, addClass, saved, resetStats, stats: brushStats } = workspaceActions(page);
const painted = {};
let dumpCount = 0;
async function dumpLabels(name) {
  const b64 = await page.evaluate(() => {
    let s = ''; const L = S.img.labels;
    for (let i = 0; i < L.length; i += 0x8000) s += String.fromCharCode.apply(null, L.subarray(i, i + 0x8000));
    return btoa(s);
  });
  const file = `painted-${dumpCount++}.bin`;
  writeFileSync(join(out, file), Buffer.from(b64, 'base64'));
  painted[name] = file;
}

// 1. Open the workspace from the printed URL; make the class table in the page.
await page.goto(url);
await page.waitForSelector('#image-list li');
check(await page.evaluate(() => !location.search.includes('token')), 'token dropped from the address bar');
// The hostile names are left out only of the README's screenshot run (GROVE_UPDATE_DOCS=1).
const hostile = plan.hostile_class ? [{ name: plan.hostile_class, color: '#ff00ff' }] : [];
for (const c of [...plan.classes, ...hostile]) await addClass(c);
const names = await page.$$eval('#class-list .cname', (inputs) => inputs.map((i) => i.value));
if (hostile.length) check(names[5] === plan.hostile_class, 'hostile class name shown as typed');
check(await page.evaluate(() => document.querySelectorAll('body img, body script:not([src])').length === 0), 'no element injected through names');
const listed = await page.$$eval('#image-list .name', (n) => n.map((e) => e.textContent));
if (hostile.length) check(listed.includes('<img src=x onerror=alert(2)>'), 'hostile image name listed as text');
log('classes made');

// 2. Paint the planned strokes on three images; undo/redo on the first.
const labelledImages = plan.images.slice(0, 3);
for (const [k, im] of labelledImages.entries()) {
  await openImage(im.image);
  for (const s of im.strokes) await paintStroke(s);
  if (k === 0) {
    const before = await page.evaluate(() => S.img.labels.filter((v) => v !== 255).length);
    await page.keyboard.press('Control+z');
    const undone = await page.evaluate(() => S.img.labels.filter((v) => v !== 255).length);
    await page.keyboard.press('Control+y');
    const redone = await page.evaluate(() => S.img.labels.filter((v) => v !== 255).length);
    check(undone < before && redone === before, `undo/redo (${before} → ${undone} → ${redone})`);
    await shot('workspace-1-paint');
  }
  await saved();
  await dumpLabels(im.image);
}
log('painted and saved', Object.keys(painted).length, 'images');

// 3. Brush response and zoom/pan on a 4000 × 3000 image.
await openImage('big_field');
await page.waitForFunction(() => [...S.tiles.values()].some((t) => t.ok));
await resetStats();
const box = await page.locator('#view').boundingBox();
const cx = box.x + box.width / 2, cy = box.y + box.height / 2;
for (let k = 0; k < 8; k++) { await page.mouse.move(cx + k * 5, cy); await page.mouse.wheel(0, -240); await page.waitForTimeout(40); }
await page.mouse.move(cx, cy);
await page.mouse.down({ button: 'right' });
await page.mouse.move(cx - 200, cy - 120, { steps: 12 });
await page.mouse.up({ button: 'right' });
await page.keyboard.press('f');
await page.waitForTimeout(300);
await page.keyboard.press('2');
await page.evaluate(() => { const r = document.getElementById('brush-size'); r.value = '60'; r.dispatchEvent(new Event('input')); });
await page.mouse.move(cx - 150, cy);
await page.mouse.down();
await page.mouse.move(cx + 150, cy + 60, { steps: 40 });
await page.mouse.up();
const stats = await brushStats();
log('4000x3000:', JSON.stringify(stats));
check(stats.stroke_p95 < 16, `brush stroke handler p95 ${stats.stroke_p95} ms < 16 ms`);
await saved();
await page.keyboard.press('Control+z');
await saved();
// The big image was for these timings only: ranking it after every training (a 12-megapixel
// prediction, as `grove suggest` would make) would add most of a minute to each.
for (const dir of ['images', 'labels']) {
  const f = join(data, dir, 'big_field.png');
  if (existsSync(f)) renameSync(f, join(data, '..', `big_field-${dir}.png`));
}
await openImage(plan.images[0].image);
await page.evaluate(() => refreshState());
check(!(await page.locator('#image-list li[data-name="big_field"]').count()), 'big_field gone from the list');

// 4. Train from the page; the page stays usable (open another image meanwhile).
const trainStart = Date.now();
await page.click('#train');
await page.waitForFunction(() => S.training);
await openImage(plan.images[3].image);
await page.waitForFunction(() => /trained on/.test(document.getElementById('train-state').textContent), null, { timeout: 60000 });
const trainSeconds = await page.evaluate(() => Number((document.getElementById('train-state').textContent.match(/in ([\d.]+) s/) || [])[1]));
log(`trained (server ${trainSeconds} s, page ${(Date.now() - trainStart) / 1000} s)`);
await page.waitForFunction(() => S.img.layerImgs.prediction && S.img.layerImgs.prediction.complete && S.img.layerImgs.prediction.naturalWidth > 0);
check(await page.locator('#layer-prediction').isChecked(), 'prediction layer shown');
check(await page.locator('#scores td').count() > 0, 'scores shown');
check((await page.locator('#scores .caveat').count()) > 0 || (await page.locator('#scores').textContent()).includes('by image'), 'score caveat or crossval shown');
check(await page.locator('#areas tr').count() >= 2, 'areas shown');
check(await page.evaluate(() => $('layer-list').dataset.stale === 'false' && !document.querySelector('#layer-list li.stale')), 'fresh layers not marked stale');
// After the model: every image ranked as `grove suggest` ranks them (tests/serve_http.rs
// compares the ranks with the command's), shown in the list.
await page.waitForFunction(() => !S.reviewing && S.ranked === S.images.length, null, { timeout: 60000 });
const ranks = await page.$$eval('#image-list li', (lis) => lis.map((li) => [li.dataset.name, (li.querySelector('.rank') || {}).textContent]));
check(ranks.every(([, r]) => /^suggested #\d+ of \d+$/.test(r || '')), `every image shows its rank: ${JSON.stringify(ranks)}`);
const firstBars = await page.locator(`#image-list li[data-name="${plan.images[0].image}"] .bars`).getAttribute('title');
check(/^labelled pixels: .+ \d/.test(firstBars), `labelled pixels per class in the list: ${firstBars}`);
const smoothing = page.locator('#scores .smoothing');
check(/^smoothing default: (expansion|none)/.test(await smoothing.textContent()) && /\(/.test(await smoothing.getAttribute('title')), 'smoothing choice stated, with its reason on hover');
log('ranked', ranks.length, 'images');
await shot('workspace-2-trained');
// The regions `grove suggest` ranks highest: a layer of boxes, and the button jumps to them
// best first, each time moving the view.
await page.waitForFunction(() => S.layers.regions.length > 0, null, { timeout: 20000 });
const regions = await page.evaluate(() => S.layers.regions.length);
check(await page.locator('#layer-regions').isChecked(), 'suggested-region layer shown');
check(await page.locator('#next-region').isEnabled(), 'next-region button enabled');
const viewOf = () => page.evaluate(() => ({ ...S.view, cursor: S.regionCursor }));
const before = await viewOf();
await page.click('#next-region');
const first = await viewOf();
check(first.cursor === 0 && (first.ox !== before.ox || first.oy !== before.oy || first.scale !== before.scale), `view moved to region 1 (${JSON.stringify(before)} → ${JSON.stringify(first)})`);
check(/suggested region 1 of/.test(await page.locator('#message').textContent()), 'the message names the region');
await shot('workspace-3-suggested');
if (regions > 1) {
  await page.click('#next-region');
  const second = await viewOf();
  check(second.cursor === 1 && (second.ox !== first.ox || second.oy !== first.oy || second.scale !== first.scale), 'view moved to region 2');
}
// Past this image's last region the button opens the next image in suggestion order.
const order = await page.evaluate(() => S.images.filter((i) => i.rank != null).sort((a, b) => a.rank - b.rank).map((i) => i.name));
const hereAt = order.indexOf(plan.images[3].image);
for (let k = await page.evaluate(() => S.regionCursor); k < regions - 1; k++) await page.click('#next-region');
await page.click('#next-region');
const nextName = order[(hereAt + 1) % order.length];
await page.waitForFunction((n) => S.img.name === n && S.regionCursor === 0 || (S.img.name === n && S.layers.gen != null && S.layers.regions.length === 0), nextName, { timeout: 30000 });
log(`${regions} suggested regions; the button moved the view, then opened ${nextName} (next by rank)`);
await openImage(plan.images[3].image);
await page.waitForFunction(() => S.layers.gen != null);

// 5. Correct: paint this image's planned strokes over the prediction, retrain.
await page.keyboard.press('f');
for (const s of plan.images[3].strokes) await paintStroke(s);
await saved();
await dumpLabels(plan.images[3].image);
// The regions were computed without these strokes: marked stale until the next training.
check(await page.evaluate(() => document.querySelector('#layer-regions').closest('li').classList.contains('stale') && /predate/.test($('layer-list').textContent)), 'suggested regions marked stale after new strokes');
await shot('workspace-4-correct');
await page.click('#train');
await page.waitForFunction(() => S.training);
// While the new model is being made the old layers are marked stale, in the list and on the
// canvas; once it is there they are reloaded and current again.
check(await page.evaluate(() => $('layer-list').dataset.stale === 'true' && document.querySelectorAll('#layer-list li.stale').length >= 3), 'layers marked stale while retraining');
await page.waitForFunction(() => !S.training && S.model && S.model.images === 4, null, { timeout: 60000 });
await page.waitForFunction(() => S.img.layerImgs.prediction && S.img.layerImgs.prediction.complete && S.layers.gen >= 2 && S.layers.gen === S.model.generation);
check(await page.evaluate(() => $('layer-list').dataset.stale === 'false' && !document.querySelector('#layer-list li.stale')), 'layers current after the retrain');
// Four labelled images: the score becomes the cross-validation by image (`grove crossval`'s
// call), and each labelled image shows its held-out score.
await page.waitForFunction(() => $('scores').dataset.kind === 'crossval' && !S.reviewing, null, { timeout: 120000 });
check((await page.locator('#scores').textContent()).includes('by image'), 'crossval score shown');
const heldOut = await page.$$eval('#image-list .score', (s) => s.map((e) => e.textContent));
check(heldOut.length === 4 && heldOut.every((t) => /^held-out IoU \d\.\d\d$/.test(t)), `held-out score per labelled image: ${heldOut}`);
await shot('workspace-5-retrained');
log('corrected and retrained; cross-validated');

// 6. Kill the server mid-session and start it again: everything saved is there.
await openImage(plan.images[4].image);
await paintStroke(plan.images[4].strokes[0]);
await saved();
await dumpLabels(plan.images[4].image);
const extra = [plan.images[4].image];
killed = true;
server.p.kill('SIGKILL');
await new Promise((r) => server.p.once('exit', r));
await paintStroke(plan.images[4].strokes[1] || plan.images[4].strokes[0]);
await page.waitForFunction(() => ['offline', 'saving'].includes(document.getElementById('save-state').dataset.state), null, { timeout: 10000 });
const offline = await page.locator('#save-state').textContent();
log('after kill, page says:', offline);
server = startServer(grove, data);
url = await server.url;
killed = false;
page.removeAllListeners('dialog');
page.on('dialog', (d) => d.accept()); // the "leave with unsaved changes?" prompt
await page.goto(url);
await page.waitForSelector('#image-list li');
for (const [name, file] of Object.entries(painted)) {
  await openImage(name);
  const same = await page.evaluate(async (b64) => {
    const want = Uint8Array.from(atob(b64), (c) => c.charCodeAt(0));
    const L = S.img.labels;
    return want.length === L.length && want.every((v, i) => v === L[i]);
  }, readFileSync(join(out, file)).toString('base64'));
  check(same, `${name}: saved labels back after the restart`);
}
log('restart: all saved labels are back');
await ctx.close();
server.p.kill();

check(problems.length === 0, `no console errors, page errors or dialogs: ${problems.join('; ')}`);
writeFileSync(join(out, 'result.json'), JSON.stringify({ painted, extra_strokes: extra, stats, train_seconds: trainSeconds, offline_message: offline, regions }, null, 1));
log('done');
