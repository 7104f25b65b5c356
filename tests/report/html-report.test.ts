import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { diffSnapshots } from '../../src/compare/diff-snapshots.js';
import { recordModulated } from '../../src/record/record-modulated.js';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { sweepModulations } from '../../src/replay/sweep.js';
import { tuneSnapshot } from '../../src/compare/tune.js';
import { propagationMatrix } from '../../src/report/html/chart-data.js';
import { readReportInput } from '../../src/report/html/inputs.js';
import { reportToJson } from '../../src/report/diff-table.js';
import { buildHtmlReport, renderHtmlReport, writeHtmlReport, type HtmlReport } from '../../src/report/html/html-report.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';
import { HOSTILE, makeAgreement, makeComparison, makeDiff, makeSweep, makeTuneJson, viaJson } from './fixtures.js';

/** The inline SVGs of a page, in order. */
function svgsOf(page: string): string[] {
  return [...page.matchAll(/<svg[\s\S]*?<\/svg>/g)].map((m) => m[0]);
}

/** Rows of the first table after `marker` as arrays of cell texts (tags stripped, entities left). */
function tableAfter(page: string, marker: string): string[][] {
  const start = page.indexOf(marker);
  const table = page.slice(page.indexOf('<tbody>', start), page.indexOf('</tbody>', start));
  return [...table.matchAll(/<tr[^>]*>([\s\S]*?)<\/tr>/g)].map((row) => [...row[1]!.matchAll(/<td[^>]*>([\s\S]*?)<\/td>/g)].map((c) => c[1]!));
}

let all: HtmlReport;
let hostile: HtmlReport;

beforeAll(async () => {
  const inputs = (h: boolean) => [viaJson(makeDiff({ hostile: h })), viaJson(makeComparison(h)), viaJson(makeSweep({ hostile: h })), viaJson(makeAgreement(h)), viaJson(makeTuneJson(h))];
  all = await buildHtmlReport(inputs(false), { names: ['diff.json', 'vs.json', 'sweep.json', 'agree.json', 'tune.json'] });
  hostile = await buildHtmlReport(inputs(true), { names: [HOSTILE.file, 'vs.json', 'sweep.json', 'agree.json', 'tune.json'], title: `Report on ${HOSTILE.layer}` });
});

describe('buildHtmlReport', () => {
  it('buildHtmlReport(all kinds) has every section and chart the report promises', () => {
    expect(all.sections).toEqual(['Verdicts', 'Propagation through depth', 'Detection read-out of the diffs', 'Scheme comparisons', 'Task performance against strength', 'Propagation matrix', 'Tuning and sensitivity', 'Tuning across depth']);
    // relative change vs depth, task vs strength, propagation matrix, depth profiles, agreement, tuning
    expect(all.charts).toBe(6);
    expect(all.warnings).toEqual([]);
  });

  it('buildHtmlReport(inputs): every chart is an inline SVG with drawn marks', () => {
    const svgs = svgsOf(all.html);
    expect(svgs).toHaveLength(all.charts);
    for (const svg of svgs) {
      expect(svg).toMatch(/^<svg xmlns="http:\/\/www\.w3\.org\/2000\/svg"/);
      // vega writes one <path> per line/area/rect mark item and labels as <text>
      expect((svg.match(/<path /g) ?? []).length).toBeGreaterThan(10);
      expect(svg).toMatch(/<text[^>]*>[^<]+<\/text>/);
    }
    // chart-specific marks: lines in the depth chart, rects in the matrix, the site's diamonds
    expect(svgs[0]).toMatch(/aria-roledescription="line mark"/);
    expect(svgs[0]).toMatch(/aria-roledescription="point"/);
    expect(svgs[2]).toMatch(/aria-roledescription="rect mark"/);
  });

  it('buildHtmlReport(inputs) writes no script, no event handler and no URL but the SVG namespace', () => {
    for (const page of [all.html, hostile.html]) {
      expect(page).not.toMatch(/<script/i);
      expect(page).not.toMatch(/<(img|iframe|link|object|embed|foreignObject)\b/i);
      expect(page).not.toMatch(/\son[a-z]+\s*=\s*["']/i);
      const urls = [...page.matchAll(/https?:\/\/[^\s"'<>)]+/g)].map((m) => m[0]);
      expect(new Set(urls)).toEqual(new Set(['http://www.w3.org/2000/svg']));
      expect(page).not.toMatch(/@import|@font-face|url\((?!#)/);
    }
  });

  it('buildHtmlReport(inputs with markup in names) never writes the markup unescaped', () => {
    for (const text of Object.values(HOSTILE)) expect(hostile.html.includes(text), text).toBe(false);
    // the names are there, escaped: in the page text and in the SVG text marks
    expect(hostile.html).toContain('&lt;script&gt;alert(&quot;layer&quot;)&lt;/script&gt;');
    expect(hostile.html).toContain('a&amp;b&quot;c&#39;&lt;script&gt;.json');
    const svgs = svgsOf(hostile.html).join('');
    expect(svgs).toMatch(/<text[^>]*>conv&lt;img src=x onerror=ale/);
    // the run label in the legend carries the hostile category (vega may leave quotes raw in text content)
    expect(svgs).toMatch(/<text[^>]*>tuning 0\.5 → ring &amp; (&quot;|")cross(&quot;|") &lt;b&gt;/);
    expect(hostile.html).toContain('<title>Report on &lt;script&gt;');
  });

  it('buildHtmlReport(inputs) gives every element id once in the page (charts cannot clash)', () => {
    const ids = [...all.html.matchAll(/\sid="([^"]+)"/g)].map((m) => m[1]!);
    expect(ids.length).toBeGreaterThan(all.charts);
    expect(new Set(ids).size).toBe(ids.length);
    for (const ref of all.html.matchAll(/url\(#([^)]+)\)/g)) expect(ids).toContain(ref[1]);
  });

  it('buildHtmlReport(inputs) says what was compared and carries the caveat', () => {
    expect(all.html).toMatch(/<td class="name">sweep\.json<\/td><td>sweep<\/td><td>model models\/glyph-net\.onnx; baseline snapshots\/base; 3 sites/);
    expect(all.html).toMatch(/nothing on this page is a measurement of neurons, of a brain/);
  });

  it('buildHtmlReport(diff with NaN metrics) shows them as "–" (JSON null) instead of failing', async () => {
    const diff = makeDiff();
    diff.layers[4]!.cosine = Number.NaN;
    diff.layers[4]!.relativeChange = Number.NaN;
    diff.layers[4]!.relativeChangeCi = null;
    const report = await buildHtmlReport([viaJson(diff)], { names: ['nan.json'] });
    const row = tableAfter(report.html, '<summary>').find((cells) => cells[1] === diff.layers[4]!.name)!;
    expect(row[3]).toBe('–');
    expect(row[4]).toBe('–');
  });

  it('buildHtmlReport(sweep without --depth-profile) says so instead of drawing an empty matrix', async () => {
    const report = await buildHtmlReport([viaJson(makeSweep({ depthProfile: false }))]);
    expect(report.charts).toBe(1);
    expect(report.html).toContain('ran without <code>--depth-profile</code>');
  });

  it('buildHtmlReport([]) refuses with a usage error', async () => {
    await expect(buildHtmlReport([])).rejects.toThrow(/no inputs to report on/);
  });
});

describe('renderHtmlReport and writeHtmlReport', () => {
  it('writeHtmlReport({ inputs: paths, out }) writes the same page renderHtmlReport returns, naming inputs by file', async () => {
    const dir = tempFolder('sonde-report-write-');
    const diffPath = join(dir, 'early.json');
    writeFileSync(diffPath, reportToJson(makeDiff()));
    const out = join(dir, 'report.html');
    const written = await writeHtmlReport({ inputs: [diffPath], out, title: 'T' });
    const text = readFileSync(out, 'utf8');
    expect(text).toBe(await renderHtmlReport([diffPath], { title: 'T' }));
    expect(written.bytes).toBe(Buffer.byteLength(text));
    expect(written.inputs).toEqual([{ name: 'early.json', kind: 'diff' }]);
    expect(text).toContain('<td class="name">early.json</td>');
  });
});

describe('buildHtmlReport on a recorded network', () => {
  it('buildHtmlReport(diff --json of a uniform gain g on a bias-free ReLU net) shows relative change g − 1 below the site', async () => {
    // positive homogeneity (DOMAIN.md): with bias-free convolutions, ReLU and pooling, a uniform gain g at
    // one ReLU output scales every later tensor by exactly g, so ‖mod − base‖/‖base‖ = g − 1 there
    const dir = tempFolder('sonde-report-net-');
    const model = join(dir, 'homog.onnx');
    writeFileSync(model, buildTinyNet({ bias: false, seed: 21 }));
    const stim = writeStimuliNpy(dir, [8, 3, 16, 16], 5);
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base'), batch: 4, threads: 1 });
    const specPath = join(dir, 'uni.json');
    writeFileSync(specPath, JSON.stringify({ site: 'relu0', kind: 'uniform', gain: 1.3 }));
    const mod = await recordModulated({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'uni'), modulate: specPath, from: join(dir, 'base'), threads: 1 });
    const diff = await diffSnapshots({ base: join(dir, 'base'), mod: mod.folder, bootstrap: 0 });
    const jsonPath = join(dir, 'diff.json');
    writeFileSync(jsonPath, reportToJson(diff));
    const report = await buildHtmlReport([jsonPath]);
    const rows = tableAfter(report.html, '<summary>');
    const below = diff.layers.filter((l) => l.belowSite >= 0);
    expect(below.length).toBeGreaterThan(1);
    for (const layer of below) {
      const row = rows.find((cells) => cells[1] === layer.name)!;
      expect(row[3], layer.name).toBe('0.300');
    }
    expect(rows.find((cells) => cells[1] === 'relu0')![0]).toBe(`${diff.layers.find((l) => l.site)!.depth} ◆`);
    // the run is labelled from the recorded modulation
    expect(report.html).toContain('uniform 1.3 @ relu0');
  });

  it('buildHtmlReport(sweep.json of a real --depth-profile sweep) draws all sweep charts; uniform gain 1 + β changes the site by exactly β', async () => {
    // at the site tensor itself a uniform gain g gives ‖g·a − a‖/‖a‖ = |g − 1| for any network (exact
    // algebra); the sweep's uniform scheme uses g = 1 + β (src/replay/sweep.ts)
    const dir = tempFolder('sonde-report-sweep-');
    const model = join(dir, 'net.onnx');
    const kinds = ['alpha', 'beta', 'gamma'];
    writeFileSync(model, buildTinyNet({ bias: true, seed: 41, classes: 3 }));
    writeFileSync(join(dir, 'net.json'), JSON.stringify({ outputs: { name: 'logits', kinds, threshold: 0 } }));
    const labels = Array.from({ length: 18 }, (_, i) => kinds[i % 3]!);
    const stim = writeStimuliNpy(dir, [18, 3, 16, 16], 43, labels);
    await recordSnapshot({ model, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base'), batch: 9, threads: 1 });
    await tuneSnapshot({ snapshot: join(dir, 'base'), out: join(dir, 'tuning.arrow') });
    await sweepModulations({ model, from: join(dir, 'base'), sites: ['relu0', 'relu1'], strengths: [0, 0.25, 0.5], task: 'detect:all', tuning: join(dir, 'tuning.arrow'), out: join(dir, 'sweep'), threads: 1, controlSeeds: 2, depthProfile: true, match: 'dprime:+0.1' });
    const path = join(dir, 'sweep', 'sweep.json');
    const report = await buildHtmlReport([path]);
    expect(report.inputs).toEqual([{ name: 'sweep.json', kind: 'sweep' }]);
    expect(report.charts).toBe(3); // task vs strength, propagation matrix, depth profiles
    expect(report.warnings).toEqual([]);
    const [input] = readReportInput(path);
    const { cells, strengthByScheme } = propagationMatrix((input as Extract<typeof input, { kind: 'sweep' }>).sweep);
    expect(strengthByScheme.get('uniform')).toBe(0.5);
    for (const site of ['relu0', 'relu1']) {
      const atSite = cells.find((c) => c.scheme === 'uniform' && c.site === site && c.belowSite === 0)!;
      expect(Math.abs(atSite.relativeChange - 0.5), site).toBeLessThan(1e-6);
    }
    expect(report.html).toContain('<h3>Calibration</h3>');
  });
});
