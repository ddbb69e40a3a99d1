// Loads a run folder's report.html and one replay page from disk in headless Chromium and
// checks them as a reader would see them. Fails (exit code 1) on any console error, page
// error or request that leaves the file itself; checks the expected elements (a verdict per
// law, the outcome map, the replay's frame count), that the verdict and figures are there with
// JavaScript off, that a table sorts, that the replay's drawing changes when it advances; saves
// screenshots.
//
// Usage: node check.mjs REPORT_HTML REPLAY_HTML SHOT_DIR
// Chromium: $CHROMIUM or /usr/bin/chromium (Debian's package); playwright-core drives it and
// downloads no browser.
import { chromium } from 'playwright-core';
import { pathToFileURL } from 'node:url';
import { mkdirSync } from 'node:fs';
import path from 'node:path';

const [reportPath, replayPath, shotDir] = process.argv.slice(2);
if (!reportPath || !replayPath || !shotDir) {
  console.error('usage: node check.mjs REPORT_HTML REPLAY_HTML SHOT_DIR');
  process.exit(2);
}
mkdirSync(shotDir, { recursive: true });

const problems = [];
function check(ok, what) {
  if (!ok) problems.push(what);
  console.log(`${ok ? 'ok  ' : 'FAIL'} ${what}`);
}

const browser = await chromium.launch({
  executablePath: process.env.CHROMIUM || '/usr/bin/chromium',
  args: [
    '--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run',
    '--disable-background-networking', '--disable-component-update', '--disable-sync',
  ],
});

// A page in its own context, watched for console errors, page errors and any request
// other than the file it was opened from.
async function open(file, { js = true, width = 1200, height = 900 } = {}) {
  const context = await browser.newContext({
    javaScriptEnabled: js,
    viewport: { width, height },
  });
  const page = await context.newPage();
  const url = pathToFileURL(path.resolve(file)).href;
  page.on('console', (m) => {
    if (m.type() === 'error') problems.push(`${file}: console error: ${m.text()}`);
  });
  page.on('pageerror', (e) => problems.push(`${file}: page error: ${e.message}`));
  await context.route('**/*', (route) => {
    const u = route.request().url();
    if (u === url) return route.continue();
    problems.push(`${file}: request to ${u}`);
    return route.abort();
  });
  await page.goto(url, { waitUntil: 'load' });
  return { context, page };
}

// ---- report.html, JavaScript on -------------------------------------------------------
{
  const { context, page } = await open(reportPath);
  const laws = await page.$$eval('#table-outcomes tbody tr td:first-child', (tds) => tds.map((t) => t.textContent));
  const cards = await page.$$eval('.law-verdict', (els) => els.map((e) => e.getAttribute('data-law')));
  check(laws.length > 0, `report: ${laws.length} laws in the outcomes table`);
  check(JSON.stringify(cards) === JSON.stringify(laws), `report: one verdict per law (${cards.join(', ')})`);
  const cardText = await page.$$eval('.law-verdict', (els) => els.map((e) => e.textContent));
  check(cardText.every((t) => /held and controlled/.test(t) && /(won|tied)/.test(t)), 'report: every verdict says where the law held and where it won or tied');
  check(await page.locator('figure[data-figure="outcome_map"] svg').count() === 1, 'report: the outcome map is an inline SVG');
  const figs = await page.locator('figure.fig svg').count();
  check(figs >= 2, `report: ${figs} inline figures`);
  await page.screenshot({ path: path.join(shotDir, 'report-top.png') });
  await page.screenshot({ path: path.join(shotDir, 'report-full.png'), fullPage: true });
  // Sorting: click the first law's slip heading twice; the column reads descending.
  const table = page.locator('#table-slip_mean_mm');
  const nAxes = await table.locator('thead th').count() - laws.length - 1;
  const head = table.locator('thead th').nth(nAxes);
  await head.click();
  await head.click();
  check(await head.getAttribute('aria-sort') === 'descending', 'report: a slip column sorts on click');
  const col = await table.locator(`tbody tr td:nth-child(${nAxes + 1})`).evaluateAll((tds) => tds.map((t) => parseFloat(t.getAttribute('data-v'))).filter((x) => !Number.isNaN(x)));
  check(col.every((v, i) => i === 0 || col[i - 1] >= v), `report: sorted descending (${col.join(' ')})`);
  check(await page.locator('#watch code.cmd').count() > 0, 'report: runs worth watching carry a trace command');
  await page.emulateMedia({ media: 'print' });
  await page.screenshot({ path: path.join(shotDir, 'report-print.png') });
  await context.close();
}

// ---- report.html, JavaScript off: the verdict and the figures are still there ----------
{
  const { context, page } = await open(reportPath, { js: false });
  check(await page.locator('.law-verdict').count() > 0, 'report without JavaScript: verdicts shown');
  check(await page.locator('figure[data-figure="outcome_map"] svg').isVisible(), 'report without JavaScript: outcome map shown');
  await context.close();
}

// ---- the replay ----------------------------------------------------------------------------
{
  const { context, page } = await open(replayPath, { height: 1000 });
  const declared = parseInt(await page.getAttribute('#stage', 'data-frames'), 10);
  const shown = parseInt(await page.textContent('#frame-count'), 10);
  const embedded = await page.evaluate(() => JSON.parse(document.getElementById('replay-data').textContent).frames.length);
  check(declared > 1 && declared === shown && shown === embedded, `replay: ${embedded} frames (page says ${shown})`);
  const law = await page.textContent('#law-status');
  check(law && law !== '—', `replay: law status shown (${law})`);
  const before = await page.evaluate(() => document.getElementById('view-side').toDataURL());
  const plotBefore = await page.evaluate(() => document.getElementById('plot-slip').toDataURL());
  await page.screenshot({ path: path.join(shotDir, 'replay-start.png') });
  // Advance with the slider to the middle, then play for a moment.
  const mid = Math.floor(embedded / 2);
  await page.locator('#scrub').evaluate((el, v) => { el.value = String(v); el.dispatchEvent(new Event('input')); }, mid);
  check(await page.textContent('#frame-no') === String(mid + 1), `replay: the slider moves to frame ${mid + 1}`);
  const after = await page.evaluate(() => document.getElementById('view-side').toDataURL());
  check(after !== before, 'replay: the side view changed');
  check(await page.evaluate(() => document.getElementById('plot-slip').toDataURL()) !== plotBefore, 'replay: the time plots moved their cursor');
  await page.click('#play');
  await page.waitForTimeout(600);
  await page.click('#play');
  const played = parseInt(await page.textContent('#frame-no'), 10);
  check(played > mid + 1, `replay: play advanced to frame ${played}`);
  await page.screenshot({ path: path.join(shotDir, 'replay-middle.png') });
  await context.close();
}

await browser.close();
if (problems.length) {
  console.error(`\n${problems.length} problem(s):\n- ${problems.join('\n- ')}`);
  process.exit(1);
}
console.log('browser check passed');
