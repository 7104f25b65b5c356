/**
 * The report in a real browser: Debian's headless Chromium loads the page from a file with networking
 * blocked, must log no console message (the page has no script, so any message is an error: a failed
 * load, a parse problem), must have the inline SVGs in its DOM with no element parsed out of a name, and
 * must produce a screenshot that is not blank. Skipped, saying so, where Chromium is not installed
 * (`.ci/run` installs it).
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import sharp from 'sharp';
import { beforeAll, describe, expect, it } from 'vitest';
import { buildHtmlReport, type HtmlReport } from '../../src/report/html/html-report.js';
import { HOSTILE, makeAgreement, makeComparison, makeDiff, makeSweep, makeTuneJson, viaJson } from './fixtures.js';

const CHROMIUM = '/usr/bin/chromium';
const available = existsSync(CHROMIUM);
/** Where the screenshot stays after the run, to look at. */
const SHOT_DIR = join(tmpdir(), 'sonde-report-browser');

/** Runs headless Chromium on a file with a fresh profile and networking off; returns stdout and stderr. */
function chromium(page: string, extra: string[]): { stdout: string; stderr: string; status: number | null } {
  const profile = mkdtempSync(join(tmpdir(), 'sonde-chromium-'));
  try {
    const result = spawnSync(CHROMIUM, [
      '--headless', '--no-sandbox', '--disable-gpu', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync',
      `--user-data-dir=${profile}`, '--enable-logging=stderr', '--v=0', '--host-resolver-rules=MAP * ~NOTFOUND', '--hide-scrollbars',
      ...extra, `file://${page}`,
    ], { encoding: 'utf8', timeout: 25_000 });
    return { stdout: result.stdout ?? '', stderr: result.stderr ?? '', status: result.status };
  } finally {
    rmSync(profile, { recursive: true, force: true });
  }
}

/** Console messages Chromium logged for the page (`--enable-logging=stderr` prints them as `:CONSOLE(` / `:CONSOLE:` lines). */
function consoleLines(stderr: string): string[] {
  return stderr.split('\n').filter((line) => /:CONSOLE[:(\]]|Uncaught/.test(line));
}

let report: HtmlReport;
let page: string;

// where Chromium is absent the reporter lists these tests as skipped under a title that says why
const TITLE = available ? 'the HTML report in headless Chromium' : `the HTML report in headless Chromium — SKIPPED: ${CHROMIUM} is not installed (apt-get install -y chromium)`;

describe.skipIf(!available)(TITLE, () => {
  beforeAll(async () => {
    mkdirSync(SHOT_DIR, { recursive: true });
    report = await buildHtmlReport(
      [viaJson(makeDiff({ hostile: true })), viaJson(makeDiff({ hostile: true, site: 5, start: 0.2, rate: -0.5, folder: 'snapshots/mod-late' })), viaJson(makeComparison(true)), viaJson(makeSweep({ hostile: true })), viaJson(makeTuneJson(true, true))],
      { names: [HOSTILE.file, 'diff-late.json', 'vs.json', 'sweep.json', 'tune.json'] },
    );
    page = join(SHOT_DIR, 'report.html');
    writeFileSync(page, report.html);
  });

  it('chromium --dump-dom: the page loads without console messages and its DOM holds every chart', () => {
    const { stdout, stderr } = chromium(page, ['--dump-dom']);
    expect(consoleLines(stderr)).toEqual([]);
    expect(stdout).toContain('</html>');
    const svgs = stdout.match(/<svg [^>]*class="marks"/g) ?? [];
    expect(svgs).toHaveLength(report.charts);
    // marks drawn inside the charts, as the browser parsed them
    expect((stdout.match(/aria-roledescription="line mark"/g) ?? []).length).toBeGreaterThan(5);
    expect((stdout.match(/aria-roledescription="rect mark"/g) ?? []).length).toBeGreaterThan(20);
    expect((stdout.match(/aria-roledescription="point"/g) ?? []).length).toBeGreaterThan(50);
    // no element was parsed out of a hostile name: the only elements of these kinds are none
    expect(stdout).not.toMatch(/<script|<img|<b>/i);
    // and the names arrived as text (the browser re-serialises < and & in text as entities)
    // (a layer's full name is in the title of its short label: attribute text, escaped there)
    expect(stdout).toMatch(/title="&lt;script&gt;alert\(&quot;layer&quot;\)&lt;\/script&gt;"/);
  });

  it('chromium --dump-dom catches a console error (the check above can fail)', () => {
    const broken = join(SHOT_DIR, 'broken.html');
    writeFileSync(broken, '<!DOCTYPE html><html><body><p>x</p><script>console.error("boom"); missingFunction();</script></body></html>');
    const lines = consoleLines(chromium(broken, ['--dump-dom']).stderr);
    expect(lines.some((l) => l.includes('boom'))).toBe(true);
    expect(lines.some((l) => l.includes('Uncaught ReferenceError'))).toBe(true);
  });

  it('chromium --screenshot: a 1280×2400 picture of the page that is not blank', async () => {
    const shot = join(SHOT_DIR, 'report.png');
    rmSync(shot, { force: true });
    const { stderr } = chromium(page, [`--screenshot=${shot}`, '--window-size=1280,2400']);
    expect(consoleLines(stderr)).toEqual([]);
    expect(existsSync(shot)).toBe(true);
    const meta = await sharp(shot).metadata();
    expect([meta.width, meta.height]).toEqual([1280, 2400]);
    // a blank page would have one colour: the report has text, lines and a coloured caveat box
    const stats = await sharp(shot).stats();
    for (const channel of stats.channels.slice(0, 3)) expect(channel.stdev).toBeGreaterThan(10);
    console.log(`report screenshot: ${shot}`);
  });
});

/**
 * The page with a script added at its end that measures the layout: it writes the numbers into the DOM
 * (read with --dump-dom) and paints a 12 px square at the top left, green when the page is no wider than
 * the window and red when it overflows sideways (read from a screenshot: headless Chromium keeps a
 * window of at least 500 px for --dump-dom, but takes screenshots at the asked width).
 */
function withMeasurement(text: string): string {
  const script = `<script>
const doc = document.documentElement;
const headline = document.querySelector('.headline');
const kinds = [...new Set([...document.querySelectorAll('[data-picture]')].map((e) => e.getAttribute('data-picture')))];
const fits = doc.scrollWidth <= window.innerWidth && document.body.scrollWidth <= window.innerWidth;
const out = { scrollWidth: doc.scrollWidth, innerWidth: window.innerWidth, headlineTop: headline ? headline.getBoundingClientRect().top : -1, kinds, fits };
const pre = document.createElement('pre'); pre.id = 'measure'; pre.textContent = JSON.stringify(out); document.body.appendChild(pre);
const mark = document.createElement('div'); mark.style.cssText = 'position:fixed;left:0;top:0;width:12px;height:12px;z-index:9;background:' + (fits ? '#00ff00' : '#ff0000'); document.body.appendChild(mark);
</script>`;
  return text.replace('</body>', `${script}</body>`);
}

describe.skipIf(!available)(`${TITLE}: the demo's report at 1280 and 390 px`, () => {
  let demoReport: string;
  beforeAll(async () => {
    const { runDemo } = await import('../../src/demo/demo.js');
    const { tempFolder } = await import('../helpers/onnx-builder.js');
    mkdirSync(SHOT_DIR, { recursive: true });
    const demo = await runDemo({ quick: true, out: join(tempFolder(), 'demo'), threads: 1 });
    demoReport = demo.files.report!;
  }, 400_000);

  for (const width of [1280, 390]) {
    it(`chromium at ${width} px: the page body does not overflow sideways, the headline is on the first screen, and every picture kind is there`, async () => {
      const { readFileSync } = await import('node:fs');
      const measured = join(SHOT_DIR, `demo-measure-${width}.html`);
      writeFileSync(measured, withMeasurement(readFileSync(demoReport, 'utf8')));
      const { stdout } = chromium(measured, ['--dump-dom', `--window-size=${width},900`]);
      const json = /<pre id="measure">([^<]*)<\/pre>/.exec(stdout)?.[1];
      expect(json, 'the measuring script ran').toBeDefined();
      const m = JSON.parse(json!.replace(/&quot;/g, '"')) as { innerWidth: number; headlineTop: number; kinds: string[] };
      // the headline is the first thing after the title
      expect(m.headlineTop).toBeGreaterThanOrEqual(0);
      expect(m.headlineTop).toBeLessThan(400);
      for (const kind of ['forest', 'stimuli', 'feature-maps', 'roc', 'signature', 'spatial-profile']) expect(m.kinds, kind).toContain(kind);
      // at this width: no horizontal overflow of the page body (wide tables and charts scroll in their own boxes)
      const shot = join(SHOT_DIR, `demo-${width}.png`);
      rmSync(shot, { force: true });
      chromium(measured, [`--screenshot=${shot}`, `--window-size=${width},3000`]);
      const meta = await sharp(shot).metadata();
      expect(meta.width).toBe(width);
      const { data } = await sharp(shot).extract({ left: 4, top: 4, width: 1, height: 1 }).raw().toBuffer({ resolveWithObject: true });
      expect([...data.subarray(0, 3)], 'green: the page fits the window; red: it overflows sideways').toEqual([0, 255, 0]);
      const stats = await sharp(shot).stats();
      for (const channel of stats.channels.slice(0, 3)) expect(channel.stdev).toBeGreaterThan(10);
      console.log(`demo report screenshot at ${width} px: ${shot}`);
    }, 60_000);
  }
});
