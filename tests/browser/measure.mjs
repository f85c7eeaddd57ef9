// Timings of the workspace for the README, one run, nothing asserted about time (run by
// `benches/workspace.sh` through the ignored test `measure_workspace` in
// tests/workspace_browser.rs, which prepares the data):
//   node measure.mjs GROVE FRESH PLAN.json BIG.png DEMO20 OUTDIR
// 1. `grove label FRESH` (images only) → classes made in the page → the plan's strokes painted
//    and saved → Train → the first prediction layer drawn: seconds from the start of
//    `grove label`. The strokes are scripted, so this is the machine's share of a user's
//    first minute plus scripted painting, not a person's painting speed.
// 2. The brush on BIG.png (4000 × 3000): stroke handler and frame times, in ms.
// 3. `grove label DEMO20` (20 labelled demo images) → Train → model shown, seconds from the
//    click, three times, alternating with `grove train DEMO20` four times.
// Writes OUTDIR/measure.json.
import { copyFileSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { spawnSync } from 'node:child_process';
import { launch, startServer, workspaceActions } from './lib.mjs';

const [grove, fresh, planPath, bigPath, demo20, out] = process.argv.slice(2);
const plan = JSON.parse(readFileSync(planPath, 'utf8'));
const log = (...a) => console.log('[measure]', ...a);

const ctx = await launch({ width: 1180, height: 860 });
const page = ctx.pages()[0] || await ctx.newPage();
const errors = [];
page.on('pageerror', (e) => errors.push(e.message));
const ws = workspaceActions(page);
const trained = (timeout) => page.waitForFunction(() => /trained on/.test(document.getElementById('train-state').textContent), null, { timeout });

// 1. From `grove label` to the first prediction.
const t0 = Date.now();
let server = startServer(grove, fresh);
// A failed check must not leave the server running.
process.on('exit', () => { if (server.p.exitCode === null) server.p.kill(); });
await page.goto(await server.url);
await page.waitForSelector('#image-list li');
for (const c of plan.classes) await ws.addClass(c);
for (const im of plan.images.slice(0, 3)) {
  await ws.openImage(im.image);
  for (const s of im.strokes) await ws.paintStroke(s);
  await ws.saved();
}
const paintedAt = (Date.now() - t0) / 1000;
await page.click('#train');
await trained(120000);
await page.waitForFunction(() => S.img.layerImgs.prediction && S.img.layerImgs.prediction.complete && S.img.layerImgs.prediction.naturalWidth > 0);
await page.evaluate(() => new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r))));
const firstPrediction = (Date.now() - t0) / 1000;
const firstTrain = await page.evaluate(() => Number((document.getElementById('train-state').textContent.match(/in ([\d.]+) s/) || [])[1]));
log(`first prediction ${firstPrediction.toFixed(1)} s after grove label started (classes and strokes done at ${paintedAt.toFixed(1)} s, training ${firstTrain} s)`);
await page.screenshot({ path: join(out, 'first-prediction.png') });

// 2. The brush on a 4000 × 3000 image, after the background ranking of the small ones.
await page.waitForFunction(() => !S.reviewing && !S.polling, null, { timeout: 120000 });
copyFileSync(bigPath, join(fresh, 'images', 'big_field.png'));
await page.evaluate(() => refreshState());
await ws.openImage('big_field');
await page.waitForFunction(() => [...S.tiles.values()].some((t) => t.ok));
await ws.resetStats();
const box = await page.locator('#view').boundingBox();
const cx = box.x + box.width / 2, cy = box.y + box.height / 2;
await page.keyboard.press('2');
await page.evaluate(() => { const r = document.getElementById('brush-size'); r.value = '60'; r.dispatchEvent(new Event('input')); });
for (let k = 0; k < 4; k++) {
  await page.mouse.move(cx - 200, cy - 100 + 50 * k);
  await page.mouse.down();
  await page.mouse.move(cx + 200, cy - 60 + 50 * k, { steps: 50 });
  await page.mouse.up();
}
for (let k = 0; k < 6; k++) { await page.mouse.wheel(0, -240); await page.waitForTimeout(30); }
const brush = await ws.stats();
log('brush on 4000x3000:', JSON.stringify(brush));
await ws.saved();
server.p.kill();
await new Promise((r) => server.p.once('exit', r));

// 3. Training 20 labelled demo images: `grove train` and the page alternately (CLI, page,
// CLI, page, CLI), each alone on the machine (the server is stopped before the command runs,
// so its cross-validation after a training does not compete).
function cliTrain() {
  const c0 = Date.now();
  const r = spawnSync(grove, ['train', demo20, '--model', join(out, 'cli.grove'), '--quiet', '--force'], { stdio: ['ignore', 'ignore', 'inherit'] });
  if (r.status !== 0) throw new Error(`grove train failed (${r.status})`);
  return (Date.now() - c0) / 1000;
}
async function pageTrain() {
  server = startServer(grove, demo20);
  await page.goto(await server.url);
  await page.waitForSelector('#image-list li');
  const c0 = Date.now();
  await page.click('#train');
  await page.waitForFunction(() => S.training);
  await trained(600000);
  const seconds = (Date.now() - c0) / 1000;
  const text = await page.$eval('#train-state', (e) => e.textContent);
  serverRuns.push(Number((/in ([0-9.]+) s/.exec(text) || [])[1]));
  server.p.kill();
  await new Promise((r) => server.p.once('exit', r));
  return seconds;
}
const cli = [cliTrain()];
const pageRuns = [];
const serverRuns = [];
for (let k = 0; k < 3; k++) {
  pageRuns.push(await pageTrain());
  cli.push(cliTrain());
}
log(`train of 20 demo images: page ${pageRuns.map((x) => x.toFixed(1)).join(', ')} s (click → model shown; the server's own training ${serverRuns.map((x) => x.toFixed(1)).join(', ')} s); grove train ${cli.map((x) => x.toFixed(1)).join(', ')} s`);
await ctx.close();
if (errors.length) throw new Error(`page errors: ${errors.join('; ')}`);
writeFileSync(join(out, 'measure.json'), JSON.stringify({
  first_prediction_seconds: firstPrediction, painted_seconds: paintedAt, first_train_seconds: firstTrain,
  brush, page_train_seconds: pageRuns, server_train_seconds: serverRuns, cli_train_seconds: cli,
}, null, 1));
