// Browser test of the dispar report pages: Debian's chromium, headless, driven by
// playwright-core (which downloads no browser). Run from the repository root after
// `cargo build --release`:
//
//   npm ci --prefix tests/browser
//   node tests/browser/report.test.mjs
//
// It starts `dispar demo --listen 127.0.0.1:0` (or, where the binary has no `demo`
// command, `dispar serve` on a temporary database loaded with demo-data/*.csv through
// the HTTP API), signs in with the read key, checks the verdict, the table rows (one
// per demo site), both charts, a period change, the series page and sign-out, and
// saves screenshots under test-output/browser/ (not committed).
//
// Environment: DISPAR_BIN (default <target>/release/dispar, <target> from
// CARGO_TARGET_DIR or ./target), CHROMIUM (default /usr/bin/chromium),
// TEST_OUTPUT (default ./test-output/browser).

import { spawn, spawnSync } from 'node:child_process';
import { createInterface } from 'node:readline';
import { mkdtempSync, mkdirSync, readFileSync, rmSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import assert from 'node:assert/strict';
import { chromium } from 'playwright-core';

const here = dirname(fileURLToPath(import.meta.url));
const root = resolve(here, '..', '..');
const targetDir = process.env.CARGO_TARGET_DIR
  ? resolve(process.env.CARGO_TARGET_DIR)
  : join(root, 'target');
const bin = process.env.DISPAR_BIN || join(targetDir, 'release', 'dispar');
const chromiumPath = process.env.CHROMIUM || '/usr/bin/chromium';
const outDir = resolve(process.env.TEST_OUTPUT || join(root, 'test-output', 'browser'));

// The demo scenario (demo-data/README.md): six sites; KES is flagged above the
// pooled rate in 2026-W15..W18 only, and the data end in 2026-W26.
const SITES = ['KES', 'MRQ', 'ODW', 'SEM', 'TLG', 'VAL'];
const DRIFT_WEEK = '2026-W16';
const LAST_WEEK = '2026-W26';

const cleanups = [];
let failed = false;

function log(message) {
  process.stdout.write(`[browser] ${message}\n`);
}

async function cleanup() {
  while (cleanups.length > 0) {
    const fn = cleanups.pop();
    try {
      await fn();
    } catch (e) {
      log(`cleanup: ${e.message}`);
    }
  }
}

/** Starts `bin args` and resolves once stdout has shown `listening on URL`. */
function startServer(args, { timeoutMs = 300_000 } = {}) {
  return new Promise((resolvePromise, reject) => {
    const child = spawn(bin, args, {
      cwd: root,
      stdio: ['ignore', 'pipe', 'pipe'],
      env: { ...process.env, RUST_LOG: process.env.RUST_LOG || 'warn' },
    });
    const lines = [];
    let stderr = '';
    const timer = setTimeout(() => {
      child.kill('SIGKILL');
      reject(new Error(`${args[0]} did not report its address in ${timeoutMs} ms\n${stderr}`));
    }, timeoutMs);
    child.stderr.on('data', (d) => {
      stderr += d.toString();
      if (stderr.length > 200_000) stderr = stderr.slice(-100_000);
    });
    child.on('exit', (code, signal) => {
      clearTimeout(timer);
      reject(new Error(`${args.join(' ')} exited (${code ?? signal}) before listening\n${stderr}`));
    });
    createInterface({ input: child.stdout }).on('line', (line) => {
      lines.push(line);
      const m = line.match(/^listening on (http:\/\/\S+)/);
      if (m) {
        clearTimeout(timer);
        child.removeAllListeners('exit');
        resolvePromise({ child, base: m[1], lines, stderr: () => stderr });
      }
    });
  });
}

function stopServer(child) {
  return new Promise((res) => {
    if (child.exitCode !== null || child.signalCode !== null) return res();
    const t = setTimeout(() => child.kill('SIGKILL'), 10_000);
    child.once('exit', () => {
      clearTimeout(t);
      res();
    });
    child.kill('SIGTERM');
  });
}

function cli(args) {
  const r = spawnSync(bin, args, { cwd: root, encoding: 'utf8' });
  if (r.status !== 0) {
    throw new Error(`dispar ${args.join(' ')} failed (${r.status}): ${r.stderr}`);
  }
  return r.stdout.trim();
}

function hasDemoCommand() {
  const r = spawnSync(bin, ['demo', '--help'], { cwd: root, encoding: 'utf8' });
  return r.status === 0 && /--listen/.test(r.stdout);
}

/** `dispar demo`: returns { base, readKey }. */
async function startDemo() {
  const server = await startServer(['demo', '--listen', '127.0.0.1:0']);
  cleanups.push(() => stopServer(server.child));
  const keyLine = server.lines.find((l) => /^read key: /.test(l));
  assert.ok(keyLine, `dispar demo printed no "read key:" line:\n${server.lines.join('\n')}`);
  return { base: server.base, readKey: keyLine.replace(/^read key: /, '').trim() };
}

/** Fallback: `dispar serve` on a fresh database, loaded from demo-data/ over HTTP. */
async function startServeWithDemoData() {
  const dir = mkdtempSync(join(tmpdir(), 'dispar-browser-'));
  cleanups.push(() => rmSync(dir, { recursive: true, force: true }));
  const database = `sqlite:${join(dir, 'dispar.db')}`;
  const adminKey = cli(['keys', 'create', '--role', 'admin', '--label', 'browser test', '--database', database]);
  const readKey = cli(['keys', 'create', '--role', 'read', '--label', 'browser test', '--database', database]);
  const server = await startServer(['serve', '--listen', '127.0.0.1:0', '--database', database]);
  cleanups.push(() => stopServer(server.child));
  const call = async (method, path, body, contentType = 'application/json') => {
    const r = await fetch(server.base + path, {
      method,
      headers: { authorization: `Bearer ${adminKey}`, 'content-type': contentType },
      body,
    });
    if (r.status >= 300) throw new Error(`${method} ${path}: ${r.status} ${await r.text()}`);
  };
  const rows = (file) =>
    readFileSync(join(root, 'demo-data', file), 'utf8')
      .trim()
      .split('\n')
      .slice(1)
      .map((l) => l.split(','));
  for (const [site, name, timeZone] of rows('sites.csv')) {
    const body = { name };
    if (timeZone) body.time_zone = timeZone;
    await call('PUT', `/v1/sites/${site}`, JSON.stringify(body));
  }
  for (const [site, line, name] of rows('lines.csv')) {
    await call('PUT', `/v1/sites/${site}/lines/${line}`, JSON.stringify(name ? { name } : {}));
  }
  const counts = readFileSync(join(root, 'demo-data', 'counts.csv'), 'utf8');
  await call('POST', '/v1/counts', counts, 'text/csv');
  return { base: server.base, readKey };
}

async function main() {
  assert.ok(existsSync(bin), `no dispar binary at ${bin}: run cargo build --release first (or set DISPAR_BIN)`);
  assert.ok(existsSync(chromiumPath), `no chromium at ${chromiumPath}: apt-get install -y chromium`);
  mkdirSync(outDir, { recursive: true });

  const demo = hasDemoCommand();
  log(demo ? 'starting dispar demo' : 'no demo command: dispar serve + demo-data/ over HTTP');
  const { base, readKey } = demo ? await startDemo() : await startServeWithDemoData();
  assert.match(readKey, /^dsp_\d+_[0-9a-f]{64}$/, 'read key format');
  log(`server at ${base}`);

  const profile = mkdtempSync(join(tmpdir(), 'dispar-chromium-'));
  cleanups.push(() => rmSync(profile, { recursive: true, force: true }));
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: chromiumPath,
    headless: true,
    args: [
      '--headless',
      '--no-sandbox',
      '--disable-gpu',
      '--disable-quic',
      '--no-first-run',
      '--disable-background-networking',
      '--disable-component-update',
      '--disable-sync',
    ],
    viewport: { width: 1366, height: 900 },
  });
  cleanups.push(() => context.close());
  const page = context.pages()[0] ?? (await context.newPage());
  const consoleErrors = [];
  page.on('console', (m) => {
    if (m.type() === 'error') consoleErrors.push(m.text());
  });
  page.on('pageerror', (e) => consoleErrors.push(e.message));
  const visited = [];
  page.on('framenavigated', (f) => {
    if (f === page.mainFrame()) visited.push(f.url());
  });

  // 1. A page without a session leads to the sign-in form.
  await page.goto(`${base}/report`);
  assert.match(new URL(page.url()).pathname, /^\/sign-in$/, `redirected to sign-in: ${page.url()}`);
  await page.screenshot({ path: join(outDir, 'sign-in.png') });

  // 2. Sign in with the read key.
  await page.fill('#key', readKey);
  await Promise.all([
    page.waitForURL((u) => u.pathname === '/report'),
    page.click('#sign-in-form button[type=submit]'),
  ]);
  const session = (await context.cookies()).find((c) => c.name === 'dispar_session');
  assert.ok(session, 'session cookie set');
  assert.equal(session.httpOnly, true, 'HttpOnly');
  assert.equal(session.sameSite, 'Strict', 'SameSite=Strict');
  assert.equal(session.path, '/');
  assert.ok(!session.value.includes(readKey.slice(4, 20)), 'the cookie is not the key');

  // 3. The default report: the latest complete week with data, six sites.
  await page.locator('#verdict').waitFor();
  assert.equal(await page.inputValue('#period'), LAST_WEEK, 'default period');
  await checkReport(page, 'default week');
  const defaultVerdict = (await page.locator('#verdict').innerText()).trim();
  const defaultFlags = (await page.locator('#flag-summary').innerText()).trim();
  assert.equal(await page.locator('table#groups tbody tr[data-name="KES"].flag-above').count(), 0,
    `KES is not flagged above in ${LAST_WEEK}`);
  await page.screenshot({ path: join(outDir, 'report-default.png'), fullPage: true });

  // 4. Change the period with the form: KES's drift week.
  await page.fill('#period', DRIFT_WEEK);
  await page.selectOption('#level', 'site');
  await Promise.all([
    page.waitForURL((u) => u.searchParams.get('period') === DRIFT_WEEK),
    page.click('#picker button[type=submit]'),
  ]);
  await checkReport(page, DRIFT_WEEK);
  const verdict = (await page.locator('#verdict').innerText()).trim();
  const flags = (await page.locator('#flag-summary').innerText()).trim();
  assert.notEqual(flags, defaultFlags, 'the flagged sites changed with the period');
  assert.notEqual(verdict, defaultVerdict, 'the verdict changed with the period');
  assert.match(flags, /KES above the pooled rate/, `KES flagged above in ${DRIFT_WEEK}: ${flags}`);
  assert.equal(await page.locator('table#groups tbody tr[data-name="KES"].flag-above').count(), 1);
  assert.equal(await page.locator('svg#rates-chart g.group.above[data-name="KES"]').count(), 1);
  assert.equal(await page.locator('svg#funnel-chart g.group.above[data-name="KES"]').count(), 1);
  assert.match(await page.locator('#report-title').innerText(), /2026-W16 · 2026-04-13 to 2026-04-19/);
  // The page opens with what changed against each site's own usual.
  assert.match(await page.locator('#verdict h1#changes').innerText(), /^KES worse than its usual: 2\.02% against 0\.\d\d%$/);
  assert.equal(await page.locator('table#groups tr[data-name="KES"] td[data-baseline="worse"]').count(), 1);
  assert.ok(await page.locator('svg#reference-chart').isVisible(), 'the reference distribution is drawn');
  await page.screenshot({ path: join(outDir, `report-${DRIFT_WEEK}.png`), fullPage: true });
  await page.locator('#charts').screenshot({ path: join(outDir, `charts-${DRIFT_WEEK}.png`) });
  await page.emulateMedia({ media: 'print' });
  await page.screenshot({ path: join(outDir, `report-${DRIFT_WEEK}-print.png`), fullPage: true });
  await page.emulateMedia({ media: 'screen' });

  // 5. The previous-period link steps back one week.
  await Promise.all([
    page.waitForURL((u) => u.searchParams.get('period') === '2026-W15'),
    page.click('#previous-period'),
  ]);
  await checkReport(page, '2026-W15');

  // 6. Lines of one site (the level switch).
  await page.fill('#period', '2026-W09');
  await page.selectOption('#level', 'line');
  await page.selectOption('#site', 'MRQ');
  await Promise.all([
    page.waitForURL((u) => u.searchParams.get('level') === 'line'),
    page.click('#picker button[type=submit]'),
  ]);
  await page.locator('#verdict').waitFor();
  assert.equal(await page.locator('table#groups tbody tr').count(), 4, 'MRQ has four lines');
  assert.match(await page.locator('#flag-summary').innerText(), /MRQ\/L2 above/, 'the spike line is flagged');
  await page.screenshot({ path: join(outDir, 'report-lines-MRQ-2026-W09.png'), fullPage: true });

  // The small site's two lines need the exact test.
  await page.goto(`${base}/report?period=${DRIFT_WEEK}&level=line&site=SEM`);
  await page.locator('#verdict').waitFor();
  assert.equal(await page.locator('table#groups tbody tr').count(), 2, 'SEM has two lines');
  assert.match(await page.locator('#verdict').innerText(), /Fisher's exact test/, 'SEM lines: exact test');

  // 7. The series page: one row and one bar per week.
  await page.goto(`${base}/series?from=2026-W10&to=${LAST_WEEK}&level=site`);
  await page.locator('svg#series-chart').waitFor();
  assert.equal(await page.locator('table#series tbody tr').count(), 17, '17 weeks W10..W26');
  assert.equal(await page.locator('svg#series-chart .period').count(), 17);
  assert.match(await page.locator('table#series tbody tr[data-period="2026-W16"]').innerText(), /KES ▲/);
  assert.doesNotMatch(await page.locator('table#series tbody tr[data-period="2026-W13"]').innerText(), /KES ▲/);
  // The headline names the changes, the strip rings them.
  assert.match(await page.locator('#verdict h1').innerText(), /KES worse than its usual in 2026-W15–W18/);
  for (const week of ['2026-W15', '2026-W16', '2026-W17', '2026-W18']) {
    assert.equal(await page.locator(`svg#series-chart [data-period="${week}"] circle.ring.worse[data-name="KES"]`).count(), 1,
      `KES ringed in ${week}`);
  }
  assert.equal(await page.locator('svg#series-chart [data-period="2026-W13"] circle.ring[data-name="KES"]').count(), 0);
  await page.screenshot({ path: join(outDir, 'series.png'), fullPage: true });

  // 8. The key never appeared in a URL.
  for (const u of visited) {
    assert.ok(!u.includes(readKey.slice(4, 20)), `key in URL ${u}`);
  }
  assert.deepEqual(consoleErrors, [], 'no console errors (e.g. CSP violations)');

  // 9. Sign out: the session ends.
  await Promise.all([
    page.waitForURL((u) => u.pathname === '/sign-in'),
    page.click('header form.who button[type=submit]'),
  ]);
  await page.goto(`${base}/report?period=${DRIFT_WEEK}`);
  assert.equal(new URL(page.url()).pathname, '/sign-in', 'signed out');

  // 10. A wrong key is refused on the form itself, and no session starts.
  await page.fill('#key', 'dsp_1_' + '0'.repeat(64));
  const [refusal] = await Promise.all([
    page.waitForResponse((r) => r.request().method() === 'POST' && new URL(r.url()).pathname === '/sign-in'),
    page.click('#sign-in-form button[type=submit]'),
  ]);
  assert.equal(refusal.status(), 401, 'a wrong key is 401');
  assert.match(refusal.headers()['content-type'] || '', /^text\/html/,
    'the refusal is the HTML form again (not a problem+json body)');
  await page.locator('#sign-in-problem').waitFor();
  assert.match(await page.locator('#sign-in-problem').innerText(), /not valid/);
  assert.equal((await context.cookies()).filter((c) => c.name === 'dispar_session').length, 0);
  await page.screenshot({ path: join(outDir, 'sign-in-refused.png') });

  log(`ok: screenshots in ${outDir}`);
}

/** The report page's fixed parts: verdict, six site rows, both charts. */
async function checkReport(page, what) {
  const verdict = page.locator('#verdict');
  await verdict.waitFor();
  assert.match(await verdict.innerText(), /differ in defect rate|No significant difference|Not testable/,
    `${what}: a verdict in words`);
  const rows = page.locator('table#groups tbody tr');
  assert.equal(await rows.count(), SITES.length, `${what}: one row per site`);
  for (const site of SITES) {
    assert.equal(await page.locator(`table#groups tbody tr[data-name="${site}"]`).count(), 1, `${what}: row ${site}`);
  }
  for (const id of ['rates-chart', 'funnel-chart']) {
    const chart = page.locator(`svg#${id}`);
    assert.ok(await chart.isVisible(), `${what}: ${id} visible`);
    const box = await chart.boundingBox();
    assert.ok(box && box.width > 200 && box.height > 100, `${what}: ${id} has a size (${JSON.stringify(box)})`);
    assert.equal(await page.locator(`svg#${id} g.group`).count(), SITES.length, `${what}: ${id} marks`);
  }
  assert.equal(await page.locator('svg#funnel-chart path.limit').count() >= 2, true, `${what}: funnel limits`);
}

main()
  .catch((e) => {
    failed = true;
    console.error(`[browser] FAILED: ${e.stack || e}`);
  })
  .finally(async () => {
    await cleanup();
    process.exit(failed ? 1 : 0);
  });
