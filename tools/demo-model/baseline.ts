/**
 * Baseline of the demo network on held-out cued-detection sets: for each glyph kind a seeded cued set
 * (half the displays contain the kind), the decision rule "logit of the cued kind > 0", and per kind the
 * hit rate H, false-alarm rate F, d′ = z(H) − z(F) (log-linear correction only when a rate is 0 or 1),
 * criterion c and accuracy. It also measures the category tuning of the last convolutional stage: for each
 * kind, the largest over channels of (mean response with the kind − mean without) / SD across the set's
 * displays, a channel's response being its spatial mean.
 *
 * Run (from the repository root):
 *   npx tsc -p tools/demo-model && node tools/demo-model/build/tools/demo-model/baseline.js [--model PATH] [--write]
 * `--write` stores models/demo/baseline.json and rewrites the table in models/demo/README.md between
 * the `baseline:start` / `baseline:end` markers. The test tests/models/demo-model.test.ts imports
 * computeBaseline and checks the committed figure.
 */
import { readFile, writeFile } from 'node:fs/promises';
import { resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { detectFromScores } from '../../src/stats/signal-detection.js';
import { RuntimeFailure } from '../../src/errors.js';
import { exposeTensors } from '../../src/graph/instrument.js';
import { loadModel } from '../../src/graph/load-model.js';
import { readSidecar } from '../../src/graph/sidecar.js';
import { createNetworkSession } from '../../src/session/network-session.js';
import { createDisplaySet, DISPLAY_SIZE, type DemoKind, isDemoKind } from '../../src/stimuli/demo/index.js';

/** Which held-out sets to use. */
export interface BaselineOptions {
  /** The ONNX model; its sidecar (same name, .json) gives the output name, kinds and layers. */
  modelPath: string;
  /** Seed of every kind's cued set (each kind's set differs: the generator forks on the cued kind). Default 7000. */
  seed?: number;
  /** Displays per kind, even; half contain the kind. Default 200. */
  perKind?: number;
  /** Runtime threads. Default 2. */
  threads?: number;
}

/** One kind's row of the table. */
export interface KindBaseline {
  kind: DemoKind;
  hits: number;
  signalTrials: number;
  falseAlarms: number;
  noiseTrials: number;
  hitRate: number;
  falseAlarmRate: number;
  dPrime: number;
  criterion: number;
  accuracy: number;
  /** Whether the log-linear correction entered d′ (a raw rate was 0 or 1). */
  corrected: boolean;
  /** Largest per-channel (mean with − mean without) / SD across displays at the last conv stage. */
  tuningEffect: number;
  /** The channel that gave it. */
  tuningChannel: number;
}

/** The whole baseline. */
export interface BaselineTable {
  model: string;
  sha256: string;
  /** The held-out sets: `sonde stimuli make --count perKind --seed seed --cued KIND` with default options. */
  sets: { seed: number; perKind: number; generator: 'sonde-glyph-displays' };
  rule: 'logit of the cued kind > 0';
  /** Tensor whose channels the tuning effect is measured on. */
  tuningLayer: string;
  kinds: KindBaseline[];
  meanAccuracy: number;
  meanDPrime: number;
  /** Kinds with a channel whose tuning effect exceeds 1 SD. */
  tunedKinds: number;
}

const BATCH = 50;

/**
 * Computes the baseline table.
 * @throws RuntimeFailure when the sidecar is missing or names kinds the generator does not draw, or has no
 *   layer labelled as a convolution stage.
 */
export async function computeBaseline(options: BaselineOptions): Promise<BaselineTable> {
  const seed = options.seed ?? 7000;
  const perKind = options.perKind ?? 200;
  const model = loadModel(options.modelPath);
  const sidecar = readSidecar(options.modelPath);
  if (!sidecar?.outputs || !sidecar.layers) {
    throw new RuntimeFailure('E_BASELINE', `model ${options.modelPath} has no sidecar with outputs and layers`, { hint: 'keep glyphnet.json beside the model' });
  }
  const kinds = sidecar.outputs.kinds;
  for (const kind of kinds) {
    if (!isDemoKind(kind)) throw new RuntimeFailure('E_BASELINE', `sidecar output kind ${JSON.stringify(kind)} is not a demo glyph kind`);
  }
  const convStages = sidecar.layers.filter((layer) => /^conv\d+/.test(layer.stage ?? ''));
  const tuningLayer = convStages[convStages.length - 1]?.name;
  if (tuningLayer === undefined) throw new RuntimeFailure('E_BASELINE', `sidecar of ${options.modelPath} labels no layer as a conv stage`);
  const outputName = sidecar.outputs.name;
  const session = await createNetworkSession(exposeTensors(model, [tuningLayer]), { threads: options.threads ?? 2, label: options.modelPath });
  const rows: KindBaseline[] = [];
  try {
    for (let k = 0; k < kinds.length; k++) {
      const kind = kinds[k] as DemoKind;
      const set = createDisplaySet({ seed, count: perKind, cued: kind });
      const scores = new Float32Array(perKind);
      const isSignal = new Uint8Array(perKind);
      let channels = 0;
      let responses = new Float64Array(0); // [display, channel] spatial means
      const plane = 3 * DISPLAY_SIZE * DISPLAY_SIZE;
      for (let start = 0; start < perKind; start += BATCH) {
        const n = Math.min(BATCH, perKind - start);
        const batch = new Float32Array(n * plane);
        for (let b = 0; b < n; b++) {
          const display = set.render(start + b);
          batch.set(display.pixels, b * plane);
          isSignal[start + b] = display.labels.includes(kind) ? 1 : 0;
        }
        const out = await session.run({ [model.input.name]: { data: batch, dims: [n, 3, DISPLAY_SIZE, DISPLAY_SIZE] } }, [outputName, tuningLayer]);
        const logits = out[outputName]!;
        for (let b = 0; b < n; b++) scores[start + b] = logits.data[b * kinds.length + k]!;
        const act = out[tuningLayer]!;
        const [, c, h, w] = act.dims as [number, number, number, number];
        if (channels === 0) {
          channels = c;
          responses = new Float64Array(perKind * c);
        }
        const area = h * w;
        for (let b = 0; b < n; b++) {
          for (let ch = 0; ch < c; ch++) {
            // NCHW: i = ((b*C + ch)*H + y)*W + x
            const base = (b * c + ch) * area;
            let sum = 0;
            for (let i = 0; i < area; i++) sum += act.data[base + i]!;
            responses[(start + b) * c + ch] = sum / area;
          }
        }
      }
      const stats = detectFromScores(scores, isSignal, 0);
      const tuning = strongestTuning(responses, channels, isSignal);
      rows.push({
        kind,
        ...stats.counts,
        hitRate: stats.hitRate,
        falseAlarmRate: stats.falseAlarmRate,
        dPrime: stats.dPrime,
        criterion: stats.criterion,
        accuracy: stats.accuracy,
        corrected: stats.corrected,
        tuningEffect: tuning.effect,
        tuningChannel: tuning.channel,
      });
    }
  } finally {
    await session.close();
  }
  const mean = (values: number[]): number => values.reduce((a, b) => a + b, 0) / values.length;
  return {
    model: model.fileName,
    sha256: model.sha256,
    sets: { seed, perKind, generator: 'sonde-glyph-displays' },
    rule: 'logit of the cued kind > 0',
    tuningLayer,
    kinds: rows,
    meanAccuracy: mean(rows.map((r) => r.accuracy)),
    meanDPrime: mean(rows.map((r) => r.dPrime)),
    tunedKinds: rows.filter((r) => r.tuningEffect > 1).length,
  };
}

/**
 * For responses [display, channel], the channel with the largest (mean over signal displays − mean over
 * the others) / SD over all displays (population SD, two-pass). Zero-variance channels score 0.
 */
export function strongestTuning(responses: Float64Array, channels: number, isSignal: Uint8Array): { channel: number; effect: number } {
  const n = isSignal.length;
  let best = { channel: -1, effect: Number.NEGATIVE_INFINITY };
  for (let ch = 0; ch < channels; ch++) {
    let sumAll = 0;
    let sumSignal = 0;
    let signals = 0;
    for (let i = 0; i < n; i++) {
      const r = responses[i * channels + ch]!;
      sumAll += r;
      if (isSignal[i] !== 0) {
        sumSignal += r;
        signals++;
      }
    }
    const meanAll = sumAll / n;
    let squares = 0;
    for (let i = 0; i < n; i++) {
      const d = responses[i * channels + ch]! - meanAll;
      squares += d * d;
    }
    const sd = Math.sqrt(squares / n);
    const effect = sd > 0 ? (sumSignal / signals - (sumAll - sumSignal) / (n - signals)) / sd : 0;
    if (effect > best.effect) best = { channel: ch, effect };
  }
  return best;
}

/** The table as Markdown, one row per kind plus the mean. */
export function formatBaselineMarkdown(table: BaselineTable): string {
  const f3 = (x: number): string => x.toFixed(3);
  const lines = [
    `Held-out cued sets: \`sonde stimuli make --count ${table.sets.perKind} --seed ${table.sets.seed} --cued KIND\` (default options), ` +
      `rule "${table.rule}"; d′ = z(H) − z(F), log-linear correction only where a rate is 0 or 1 (marked *). ` +
      `Tuning: largest per-channel (mean with − mean without) / SD across displays at \`${table.tuningLayer}\`.`,
    '',
    '| kind | H | F | d′ | c | accuracy | tuning (SD) |',
    '| --- | ---: | ---: | ---: | ---: | ---: | ---: |',
  ];
  for (const r of table.kinds) {
    lines.push(`| ${r.kind} | ${f3(r.hitRate)} | ${f3(r.falseAlarmRate)} | ${f3(r.dPrime)}${r.corrected ? '*' : ''} | ${f3(r.criterion)} | ${f3(r.accuracy)} | ${r.tuningEffect.toFixed(2)} (ch ${r.tuningChannel}) |`);
  }
  lines.push(`| **mean** | | | ${f3(table.meanDPrime)} | | **${f3(table.meanAccuracy)}** | ${table.tunedKinds} of ${table.kinds.length} kinds > 1 SD |`);
  return lines.join('\n');
}

async function main(): Promise<void> {
  const args = process.argv.slice(2);
  const write = args.includes('--write');
  const modelFlag = args.indexOf('--model');
  const modelPath = resolve(modelFlag >= 0 && args[modelFlag + 1] !== undefined ? args[modelFlag + 1]! : 'models/demo/glyphnet.onnx');
  const started = performance.now();
  const table = await computeBaseline({ modelPath });
  const markdown = formatBaselineMarkdown(table);
  process.stdout.write(`${markdown}\n(${((performance.now() - started) / 1000).toFixed(1)} s)\n`);
  if (!write) return;
  if (modelPath !== resolve('models/demo/glyphnet.onnx')) throw new RuntimeFailure('E_BASELINE', '--write records the committed model only; drop --model');
  await writeFile('models/demo/baseline.json', JSON.stringify(table, null, 2) + '\n');
  const readmePath = 'models/demo/README.md';
  const readme = await readFile(readmePath, 'utf8');
  const pattern = /(<!-- baseline:start -->\n)[\s\S]*?(\n<!-- baseline:end -->)/;
  if (!pattern.test(readme)) throw new RuntimeFailure('E_BASELINE', `${readmePath} has no baseline:start / baseline:end markers`);
  await writeFile(readmePath, readme.replace(pattern, `$1${markdown}$2`));
  process.stdout.write('wrote models/demo/baseline.json and the table in models/demo/README.md\n');
}

if (process.argv[1] !== undefined && import.meta.url === pathToFileURL(process.argv[1]).href) await main();
