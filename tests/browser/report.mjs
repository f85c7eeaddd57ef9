// grove's HTML reports (`eval --report`, `crossval --report`) in headless Chromium. Run by
// tests/report_browser.rs:  node report.mjs OUTDIR NAME=FILE.html...
// For each report: no console errors, no page errors, no failed requests, no request that is
// not the file itself or a data: URI; then it reads back what the page shows (tables, chart
// data, pictures) into OUTDIR/NAME.json for the Rust side to compare with the JSON scores,
// and screenshots OUTDIR/NAME.png (docs/report-NAME.png with GROVE_UPDATE_DOCS=1).
import { writeFileSync, copyFileSync } from 'node:fs';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { launch } from './lib.mjs';

const [out, ...reports] = process.argv.slice(2);
const docs = process.env.GROVE_UPDATE_DOCS ? join(process.cwd(), '../../docs') : null;
const ctx = await launch({ width: 1180, height: 900 });
let failed = false;

for (const spec of reports) {
  const [name, file] = spec.split('=');
  const url = pathToFileURL(file).href;
  const page = await ctx.newPage();
  const problems = [];
  page.on('console', (m) => { if (m.type() === 'error' || m.type() === 'warning') problems.push(`console ${m.type()}: ${m.text()}`); });
  page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
  page.on('dialog', (d) => { problems.push(`dialog opened: ${d.message()} (markup from a name ran?)`); d.dismiss(); });
  page.on('requestfailed', (r) => problems.push(`request failed: ${r.url().slice(0, 80)} ${r.failure()?.errorText}`));
  page.on('request', (r) => {
    const u = r.url();
    if (u !== url && !u.startsWith('data:')) problems.push(`unexpected request: ${u}`);
  });
  await page.goto(url, { waitUntil: 'load' });
  const shown = await page.evaluate(() => {
    const val = (el) => (el && el.dataset.value !== '' ? Number(el.dataset.value) : null);
    const cells = (tr) => [...tr.querySelectorAll('td.num')].map(val);
    const rows = (sel, key) => [...document.querySelectorAll(`${sel} tbody tr[data-${key}]`)]
      .map((tr) => ({ key: tr.dataset[key], values: cells(tr), text: tr.innerText }));
    const box = (el) => { const r = el.getBoundingClientRect(); return [r.width, r.height]; };
    const imgs = [...document.querySelectorAll('.thumbs img')];
    return {
      title: document.title,
      cards: Object.fromEntries([...document.querySelectorAll('.card')].map((c) => [c.id.replace('card-', ''), val(c.querySelector('.value'))])),
      per_class: rows('#per-class', 'class'),
      per_image: rows('#per-image', 'image'),
      folds: rows('#folds', 'fold'),
      fold_mean: [...document.querySelectorAll('#folds tr.mean td.num')].map(val),
      fold_classes: rows('#fold-classes', 'class'),
      confusion: [...document.querySelectorAll('#confusion rect.cell')].map((r) => [Number(r.dataset.truth), Number(r.dataset.pred), Number(r.dataset.count)]),
      confusion_box: box(document.querySelector('#confusion')),
      iou_bars: [...document.querySelectorAll('#iou-bars rect.bar')].map((r) => [r.dataset.label, Number(r.dataset.value), Number(r.getAttribute('width'))]),
      importance_bars: [...document.querySelectorAll('#importance-bars rect.bar')].map((r) => [r.dataset.label, Number(r.dataset.value)]),
      oob: val(document.querySelector('#oob [data-value]')),
      oob_text: document.querySelector('#oob')?.innerText ?? '',
      thumbnail_rows: [...document.querySelectorAll('.thumbs')].map((t) => t.dataset.image),
      images_total: imgs.length,
      images_loaded: imgs.filter((i) => i.complete && i.naturalWidth > 0).length,
      scripts: document.scripts.length,
      external: [...document.querySelectorAll('[src],[href]')].map((e) => e.getAttribute('src') || e.getAttribute('href')).filter((u) => !u.startsWith('data:') && !u.startsWith('#')),
    };
  });
  shown.problems = problems;
  writeFileSync(join(out, `${name}.json`), JSON.stringify(shown, null, 1));
  const shot = join(out, `${name}.png`);
  await page.screenshot({ path: shot, fullPage: true });
  if (docs) {
    const top = join(out, `${name}-top.png`);
    await page.screenshot({ path: top, clip: { x: 0, y: 0, width: 1180, height: 1500 } });
    copyFileSync(top, join(docs, `report-${name}.png`));
  }
  if (problems.length) { console.error(`${name}:\n  ${problems.join('\n  ')}`); failed = true; }
  await page.close();
}
await ctx.close();
process.exit(failed ? 1 : 0);
