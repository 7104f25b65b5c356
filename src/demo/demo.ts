import { existsSync, writeFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { UsageError } from '../errors.js';
import { loadModel } from '../graph/load-model.js';
import { readSidecar, type ModelSidecar } from '../graph/sidecar.js';
import { makeStimulusSet } from '../stimuli/demo/writer.js';
import type { DemoDisplayOptions } from '../stimuli/demo/options.js';
import { readSensitivityTable, readTuningTable } from '../snapshot/tables.js';
import { compareTables, type TableComparison } from '../compare/compare-tables.js';
import { describeBelow, describeDepthProfile } from '../compare/diff-verdict.js';
import { diffSnapshots } from '../compare/diff-snapshots.js';
import { type DiffReport } from '../compare/diff-types.js';
import { recordModulated } from '../record/record-modulated.js';
import { recordSnapshot } from '../record/record-snapshot.js';
import { senseSites } from '../replay/sense.js';
import { sweepModulations } from '../replay/sweep.js';
import type { SweepResult } from '../replay/sweep-types.js';
import { loadModulationTables } from '../replay/modulation-tables.js';
import { prepareDemoFolder } from '../outputs/output-folder.js';
import { tuneSnapshot } from '../compare/tune.js';
import { signed } from '../format.js';
import { inspectModel } from '../record/inspect-model.js';
import { compareAtSize, type SizeMatchedComparison } from '../replay/size-matched.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { writeHtmlReport } from '../report/html/html-report.js';

/** The built-in demo network, relative to the package. */
export const DEMO_MODEL = new URL('../../models/demo/glyphnet.onnx', import.meta.url).pathname;

/** Options of `runDemo`. */
export interface DemoOptions {
  /** Output folder (default `snapshots/demo`). */
  out?: string;
  /** A smaller run (fewer stimuli, sites, categories and strengths) for tests and a first look. */
  quick?: boolean;
  /** Seed of the fitting stimulus set (default 2024); the held-out set uses seed + 1. */
  seed?: number;
  /** Runtime threads (0: the runtime chooses). */
  threads?: number;
  /** Called at the start of each step with a one-line description. */
  onStep?: (step: string) => void;
  /** Called as the long steps advance (the sweep: cells done of all; the comparison: ceiling fits and held-out scores), for a progress bar. */
  onProgress?: (done: number, total: number, detail: string) => void;
}

/** What the demo produced. */
export interface DemoResult {
  folder: string;
  sites: string[];
  sweep: SweepResult;
  diffs: Array<{ label: string; site: string; report: DiffReport }>;
  agreement: TableComparison;
  /** Held-out comparison of the schemes at one size of site modulation, with its references. */
  comparison: SizeMatchedComparison;
  files: Record<string, string>;
  /** The scheme row with the largest held-out ROC-area change (ceiling and shuffled rows excluded). */
  headline: { site: string; scheme: string; size: number; aucChange: number; low: number; high: number; fractionOfCeiling: number | null };
  summary: string[];
}

/** Sizes of the full and the quick demo. */
const PLAN = {
  full: { stimuli: 480, strengths: [0, 0.025, 0.05, 0.1, 0.2, 0.4], controlSeeds: 3, sites: 3, categories: 8, resamples: 400 },
  quick: { stimuli: 96, strengths: [0, 0.05, 0.2], controlSeeds: 2, sites: 2, categories: 3, resamples: 100 },
} as const;

/**
 * The demo's task setting: more clutter and pixel noise than the network was trained with (clutter 0.6,
 * noise 0.18), so that detection is hard (held-out ROC area about 0.68 on average over the eight kinds,
 * measured on 480 displays at seed 2024) and a gain has room to help.
 */
export const DEMO_DISPLAYS = { clutter: 1, noise: 0.3 } as const;

/** The window of the demo's windowed run: a Gaussian bump centred in the left third of the map (map-relative units). */
export const DEMO_WINDOW = { shape: 'gaussian', cx: 0.3, cy: 0.5, sigma: 0.15, outside: 1 } as const;

/** Size of site modulation the schemes are compared at: weighted mean |g − 1| of 20 %, inside the 5–30 % band. */
export const DEMO_COMPARISON_SIZE = 0.2;

/**
 * Runs the whole job on the built-in demo network: generates the search displays, records the
 * baseline, computes tuning and sensitivity at several sites, sweeps the tuning-based and
 * sensitivity-based schemes with the uniform and shuffled controls, diffs the best cell at an early
 * and a late site, and collects everything for the report.
 * @throws UsageError when the demo model is missing from the package.
 */
export async function runDemo(options: DemoOptions = {}): Promise<DemoResult> {
  if (!existsSync(DEMO_MODEL)) throw new UsageError('E_DEMO', `the demo network ${DEMO_MODEL} is missing from this installation`);
  const plan = options.quick ? PLAN.quick : PLAN.full;
  const folder = resolve(options.out ?? join('snapshots', 'demo'));
  // before each step, the files of the steps done so far are recorded as the demo's (see prepareDemoFolder)
  const step = (text: string): void => {
    demoFolder.settle(false);
    options.onStep?.(text);
  };
  const threads = options.threads ?? 0;
  const model = loadModel(DEMO_MODEL);
  const sidecar = readSidecar(DEMO_MODEL) as (ModelSidecar & { stimuli?: DemoDisplayOptions }) | null;
  const kinds = sidecar?.outputs?.kinds ?? [];
  const stages = (sidecar?.layers ?? []).map((l) => l.name).filter((name) => name !== sidecar?.outputs?.name);
  if (kinds.length === 0 || stages.length < 2) throw new UsageError('E_DEMO', `the demo network's sidecar lacks outputs.kinds or layers`);
  // an early, a middle and a late stage (sites must be activation outputs: the sidecar lists those)
  const conv = (sidecar?.layers ?? []).filter((l) => /relu|act/i.test(l.name) || /conv/i.test(l.stage ?? '')).map((l) => l.name);
  const candidates = conv.length >= 2 ? conv : stages;
  const picks = plan.sites === 2 ? [candidates[0]!, candidates[candidates.length - 1]!] : [candidates[0]!, candidates[Math.floor((candidates.length - 1) / 2)]!, candidates[candidates.length - 1]!];
  const sites = [...new Set(picks)];
  const categories = kinds.slice(0, plan.categories);

  const demoFolder = prepareDemoFolder(folder);
  const files: Record<string, string> = {};
  const seed = options.seed ?? 2024;
  const heldOutSeed = (seed + 1) % 2 ** 32;
  step(`generating ${plan.stimuli} search displays to fit gains on (seed ${seed}) and ${plan.stimuli} held-out ones to measure detection on (seed ${heldOutSeed}), clutter ${DEMO_DISPLAYS.clutter}, noise ${DEMO_DISPLAYS.noise}`);
  const stimuliFolder = join(folder, 'stimuli');
  await makeStimulusSet({ ...(sidecar?.stimuli ?? {}), ...DEMO_DISPLAYS, out: stimuliFolder, count: plan.stimuli, seed, format: 'npy', cued: null });
  const heldOutFolder = join(folder, 'stimuli-heldout');
  await makeStimulusSet({ ...(sidecar?.stimuli ?? {}), ...DEMO_DISPLAYS, out: heldOutFolder, count: plan.stimuli, seed: heldOutSeed, format: 'npy', cued: null });
  const stimuli = join(heldOutFolder, 'stimuli.npy');
  const labels = join(heldOutFolder, 'labels.csv');
  files.stimuli = stimuliFolder;
  files['stimuli-heldout'] = heldOutFolder;

  step('recording both baselines (every default layer)');
  const fitBase = await recordSnapshot({ model, stimuli: join(stimuliFolder, 'stimuli.npy'), labels: join(stimuliFolder, 'labels.csv'), out: join(folder, 'baseline'), threads });
  files.baseline = fitBase.folder;
  // detection is measured on the held-out set: the sweep, the comparison and the diffs read this one
  const base = await recordSnapshot({ model, stimuli, labels, out: join(folder, 'baseline-heldout'), threads });
  files['baseline-heldout'] = base.folder;

  step('tuning of every channel for every glyph kind');
  const tuningPath = join(folder, 'tuning.arrow');
  await tuneSnapshot({ snapshot: fitBase.folder, out: tuningPath });
  files.tuning = tuningPath;

  step(`gain sensitivities at ${sites.length} sites (exact: gradients of the downstream part compiled into the graph)`);
  const sensitivityPath = join(folder, 'sensitivity.arrow');
  await senseSites({ model, from: fitBase.folder, site: sites, stimuliOf: 'each', out: sensitivityPath, threads });
  files.sensitivity = sensitivityPath;
  const agreement = compareTables(readTuningTable(tuningPath).blocks, readSensitivityTable(sensitivityPath).blocks);
  files.agreement = join(folder, 'agreement.json');
  writeFileSync(files.agreement, json(agreement));

  step(`sweeping tuning, sensitivity, uniform and shuffled gain at ${sites.length} sites × ${plan.strengths.length} strengths × ${categories.length} cued kinds`);
  const sweepFolder = join(folder, 'sweep');
  const sweep = await sweepModulations({
    model,
    from: base.folder,
    sites,
    schemes: ['tuning', 'sensitivity', 'uniform', 'shuffled'],
    strengths: plan.strengths,
    task: `detect:${categories.join(',')}`,
    tuning: tuningPath,
    sensitivity: sensitivityPath,
    controlSeeds: plan.controlSeeds,
    depthProfile: true,
    match: 'dprime:+0.5',
    out: sweepFolder,
    restart: true,
    threads,
    ...(options.onProgress ? { onProgress: (p: { cellsDone: number; cellsTotal: number }) => options.onProgress!(p.cellsDone, p.cellsTotal, 'cells') } : {}),
  });
  files.sweep = join(sweepFolder, 'sweep.json');

  step(`comparing the schemes on the held-out set at ${100 * DEMO_COMPARISON_SIZE} % site modulation, with shuffled, criterion-shift and fitted-ceiling references, and tuning-based gain at all ${candidates.length} sites at once`);
  const tables = loadModulationTables({ tuning: tuningPath, sensitivity: sensitivityPath });
  const inspection = await inspectModel(model);
  const comparison = await compareAtSize({ model, inspection, fit: openSnapshot(fitBase.folder), heldOut: openSnapshot(base.folder), sites, allSites: candidates, categories, size: DEMO_COMPARISON_SIZE, tables, controlSeeds: 2, resamples: plan.resamples, seed: 1, threads, ...(options.onProgress ? { onProgress: options.onProgress } : {}) });
  files.comparison = join(folder, 'comparison.json');
  writeFileSync(files.comparison, json(comparison));

  step('diffing an attention-sized tuning-based cell at an early and a late site, layer by layer');
  const diffs: DemoResult['diffs'] = [];
  for (const [label, site] of [['early', sites[0]!], ['late', sites[sites.length - 1]!]] as const) {
    const chosen = attentionSizedCell(sweep, site);
    const specPath = join(folder, `cell-${label}.json`);
    writeFileSync(specPath, json({ site, kind: 'tuning', target: chosen.category, strength: chosen.strength }));
    const mod = await recordModulated({ model, stimuli, labels, out: join(folder, `modulated-${label}`), modulate: specPath, from: base.folder, tables: tables.tables, categories: tables.categories, threads });
    const report = await diffSnapshots({ base: base.folder, mod: mod.folder, tuning: (layer) => tables.tables.tuning?.(layer, chosen.category), target: chosen.category, task: `detect:${chosen.category}`, bootstrap: options.quick ? 100 : 500, seed: 1 });
    files[`diff-${label}`] = join(folder, `diff-${label}.json`);
    writeFileSync(files[`diff-${label}`]!, json(report));
    diffs.push({ label, site, report });
  }

  step('recording the early cell again inside a spatial window (a Gaussian around the left third of the map), for the window pictures');
  const early = attentionSizedCell(sweep, sites[0]!);
  const windowSpec = join(folder, 'cell-window.json');
  writeFileSync(windowSpec, json({ site: sites[0]!, kind: 'tuning', target: early.category, strength: Math.max(early.strength, 0.2), window: DEMO_WINDOW }));
  const windowed = await recordModulated({ model, stimuli, labels, out: join(folder, 'modulated-window'), modulate: windowSpec, from: base.folder, tables: tables.tables, categories: tables.categories, threads });

  step('writing the HTML report');
  files.report = join(folder, 'report.html');
  const pictures = [
    { base: base.folder, mod: join(folder, 'modulated-early'), tuning: tuningPath, title: `early site, tuning-based gain toward ${early.category}` },
    { base: base.folder, mod: windowed.folder, tuning: tuningPath, title: 'early site inside a window' },
  ];
  await writeHtmlReport({ inputs: [files.comparison, files['diff-early']!, files['diff-late']!, files.sweep, files.agreement], out: files.report, title: 'Sonde demo: attention-like gain in a glyph-detection network', pictures });

  const summary: string[] = comparisonLines(comparison, plan.stimuli, seed, heldOutSeed);
  const head = headlineOf(comparison);
  const ranked = [...sweep.best].filter((b) => Number.isFinite(b.dPrimeChange)).sort((a, b) => b.dPrimeChange - a.dPrimeChange);
  const top = ranked[0];
  if (top && top.dPrimeChange > 0) summary.push(`sweep, d′ at the fixed threshold (held out): largest gain with ${top.scheme} at ${top.site} (strength ${top.strength}), d′ ${signed(top.dPrimeChange)}, site activity changed by ${(100 * top.siteActivityChange).toFixed(1)} %`);
  else summary.push(`sweep, d′ at the fixed threshold (held out): no scheme and strength raised the mean d′ at any site; the gains mostly move the criterion towards "present"`);
  for (const d of diffs) {
    const task = d.report.task!;
    const cell = task.categories[0]!;
    summary.push(`${d.label} site ${d.site}, tuning-based gain toward ${cell.category}: hit rate ${signed(cell.change.hitRatePp, 1)} pp, false alarms ${signed(cell.change.falseAlarmRatePp, 1)} pp, d′ ${signed(cell.change.dPrime)}`);
    const survival = d.report.survival.layer ? `stays above the noise floor down to ${d.report.survival.layer} (${describeBelow(d.report.survival.belowSite!, d.report.depthUnit)})` : 'does not rise above the noise floor below the site';
    summary.push(`its activity change ${describeDepthProfile(d.report)} and ${survival}`);
  }
  const schemeMeans = ['tuning', 'sensitivity'].map((scheme) => {
    const chosen = sweep.cells.filter((c) => c.scheme === scheme && c.strength !== 0);
    return { scheme, mean: chosen.reduce((s, c) => s + c.change.dPrime, 0) / Math.max(1, chosen.length) };
  });
  summary.push(`tuning-based vs sensitivity-based gain: mean Δd′ ${signed(schemeMeans[0]!.mean, 3)} vs ${signed(schemeMeans[1]!.mean, 3)} over all non-zero strengths`);
  if (sweep.control) summary.push(`tuning-based vs shuffled control: ${signed(sweep.control.meanTuning, 3)} vs ${signed(sweep.control.meanShuffled, 3)}, p = ${sweep.control.pValue.toPrecision(2)} (${sweep.control.test})`);
  const pooled = agreement.layers.map((l) => `${l.layer} r=${l.pooled.pearson.toFixed(2)}`).join(', ');
  summary.push(`tuning–sensitivity agreement (pooled Pearson r): ${pooled}`);
  demoFolder.settle(true);
  return { folder, sites, sweep, diffs, agreement, comparison, files, headline: head, summary };
}

const aucText = (i: { estimate: number; low: number; high: number }): string => `${signed(i.estimate, 3)} [${signed(i.low, 3)}, ${signed(i.high, 3)}]`;

/** The scheme row (not a reference) with the largest held-out ROC-area change. */
function headlineOf(c: SizeMatchedComparison): DemoResult['headline'] {
  const schemes = c.effects.filter((e) => e.scheme !== 'ceiling' && !e.scheme.startsWith('shuffled'));
  const top = schemes.reduce((a, e) => (e.aucChange.estimate > a.aucChange.estimate ? e : a), schemes[0]!);
  return { site: top.site, scheme: top.scheme, size: top.size, aucChange: top.aucChange.estimate, low: top.aucChange.low, high: top.aucChange.high, fractionOfCeiling: top.fractionOfCeiling };
}

/** The terminal summary of the size-matched comparison. */
function comparisonLines(c: SizeMatchedComparison, count: number, seed: number, heldOutSeed: number): string[] {
  const lines = [`held-out evaluation: gains from ${count} displays (seed ${seed}), detection on ${count} others (seed ${heldOutSeed}); unmodulated ROC area ${c.baseAuc.toFixed(3)} (mean over ${c.categories.length} cued kinds); every gain scaled to ${(100 * c.size).toFixed(0)} % mean |g − 1| at its site; ΔAUC with 95 % bootstrap intervals over the held-out displays`];
  const sites = [...new Set(c.effects.map((e) => e.site))];
  for (const site of sites) {
    const rows = c.effects.filter((e) => e.site === site);
    const short = site.includes('+') ? `all ${site.split('+').length} sites at once (${(100 * rows[0]!.size).toFixed(1)} % each)` : site;
    lines.push(`${short}: ${rows.map((e) => `${e.scheme} ${aucText(e.aucChange)}${e.fractionOfCeiling !== null ? ` (${(100 * e.fractionOfCeiling).toFixed(0)} % of ceiling)` : ''}${e.fitSetAucChange !== null ? ` (${signed(e.fitSetAucChange, 3)} on the fitting set)` : ''}`).join('; ')}`);
  }
  for (const v of c.versusShuffled) lines.push(`tuning − shuffled at ${v.site.includes('+') ? 'all sites' : v.site}: ΔAUC ${aucText(v.difference)}${intervalSide(v.difference)}`);
  const head = headlineOf(c);
  const row = c.effects.find((e) => e.site === head.site && e.scheme === head.scheme)!;
  lines.push(`criterion-shift reference for ${row.scheme} at ${row.site.includes('+') ? 'all sites' : row.site}: at the fixed threshold the hit rate changes by ${signed(row.hitRatePp, 1)} pp with false alarms ${signed(row.falseAlarmRatePp, 1)} pp; a constant shift of the readout giving the same false alarms changes it by ${signed(row.criterionShiftHitRatePp, 1)} pp and leaves the ROC area unchanged`);
  return lines;
}

/**
 * The tuning-scheme cell at `site` whose site activity change is closest to 10 % (inside the 5–30 %
 * rule-of-thumb band), for the cued kind whose d′ it changed most in the positive direction.
 */
export function attentionSizedCell(sweep: SweepResult, site: string): { strength: number; category: string } {
  const cells = sweep.cells.filter((c) => c.site === site && c.scheme === 'tuning' && c.strength !== 0);
  if (cells.length === 0) throw new UsageError('E_DEMO', `the sweep has no tuning-based cell at ${site}`);
  const strength = cells.reduce((a, c) => (Math.abs(c.siteActivityChange - 0.1) < Math.abs(a.siteActivityChange - 0.1) ? c : a), cells[0]!).strength;
  const atStrength = cells.filter((c) => c.strength === strength);
  const category = atStrength.reduce((a, c) => (c.change.dPrime > a.change.dPrime ? c : a), atStrength[0]!).category;
  return { strength, category };
}

function json(value: unknown): string {
  return `${JSON.stringify(value, (_k, v: unknown) => (typeof v === 'number' && !Number.isFinite(v) ? null : ArrayBuffer.isView(v) ? Array.from(v as Float64Array) : v), 2)}\n`;
}

/** Where a 95 % interval lies against 0, in words: " (interval above 0)", " (interval below 0)" or " (interval includes 0)". */
export function intervalSide(interval: { low: number; high: number }): string {
  if (interval.low > 0) return ' (interval above 0)';
  if (interval.high < 0) return ' (interval below 0)';
  return ' (interval includes 0)';
}
