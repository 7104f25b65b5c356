/**
 * One site's measurement: perturbed rows (stimulus, channel, step variant) fed through the part of the
 * network downstream of the site in double-buffered batches, their readouts summed per (variant,
 * channel, category); boundary tensors streamed from a baseline or computed by running the network.
 * The formulas turning the sums into sensitivities are in sense-estimate.ts.
 */
import { RuntimeFailure, UsageError } from '../errors.js';
import { exposeForRuntime } from '../graph/instrument.js';
import { siteGeometry } from '../modulation/site-shape.js';
import type { SiteShape } from '../modulation/types.js';
import { siteShapes } from '../record/site-shapes.js';
import { injectModulations, modulationInputDims, modulationInputNames, type InjectionSite } from '../graph/inject.js';
import { runRowBytes, rowsWithin } from '../graph/run-memory.js';
import type { LoadedModel } from '../graph/load-model.js';
import type { TailGraph } from '../graph/tail.js';
import { createNetworkSession, type FloatTensor, type NetworkSession } from '../session/network-session.js';
import type { LayerBatch, Snapshot } from '../snapshot/snapshot.js';
import type { StimulusSource } from '../stimuli/source.js';
import type { LayerInfo, ModelInspection } from '../record/inspect-model.js';
import { sensitivityFromSums } from './sense-estimate.js';
import type { ReadoutChoice } from './sense-plan.js';
import type { SenseMethod, SenseOptions, SiteSensitivity } from './sense-types.js';

/** Everything one site's measurement needs, decided by `senseSites`. */
export interface SiteRun {
  site: string;
  layer: LayerInfo;
  tail: TailGraph;
  model: LoadedModel;
  inspection: ModelInspection;
  readout: ReadoutChoice;
  weights: { weights: Uint8Array; counts: Int32Array };
  kind: 'gain' | 'offset';
  step: number;
  method: SenseMethod;
  rowsPerRun: number;
  feedBytes: number;
  /** Bytes of tensors one runtime call may hold (graph/run-memory.ts): caps the rows per call with `rowsPerRun` and `feedBytes`. */
  runBytes: number;
  threads: number;
  baseline: Snapshot | null;
  source: StimulusSource | null;
  batch: number;
  byName: Map<string, LayerInfo>;
  onProgress: SenseOptions['onProgress'];
  /** Local stimulus indices [start, end) to run (a shard; all by default). */
  range?: [number, number];
  /** Keep the readout sums on the block (shards). */
  keepSums?: boolean;
}

/** A stimulus's boundary tensors, as views into a batch's arrays. */
export interface StimulusValues {
  index: number;
  /** One per boundary tensor: the stimulus's values. */
  values: Float32Array[];
}

/**
 * Variants of a perturbed row: 0 = +h, 1 = −h, 2 = +h/2, 3 = −h/2; −1 = unperturbed.
 * Row sums are accumulated per (variant, channel, category) in doubles; the means are linear in them.
 */
const VARIANT_SIGN = [1, -1, 0.5, -0.5] as const;

/** The feeds of one downstream run under construction. */
class RowBuffer {
  readonly boundary: Float32Array[];
  readonly gain: Float32Array;
  readonly offset: Float32Array;
  readonly stimulus: Int32Array;
  readonly channel: Int32Array;
  readonly variant: Int8Array;
  /** For an unperturbed row: the channels skipped for its stimulus (all zero at the site), else null. */
  readonly skipped: (Int32Array | null)[];
  rows = 0;

  constructor(readonly capacity: number, readonly perRow: readonly number[], readonly channels: number) {
    this.boundary = perRow.map((n) => new Float32Array(capacity * n));
    this.gain = new Float32Array(capacity * channels).fill(1);
    this.offset = new Float32Array(capacity * channels);
    this.stimulus = new Int32Array(capacity);
    this.channel = new Int32Array(capacity);
    this.variant = new Int8Array(capacity);
    this.skipped = new Array<Int32Array | null>(capacity).fill(null);
  }

  /** Restores identity in the perturbed entries and empties the buffer. */
  clear(): void {
    const C = this.channels;
    for (let r = 0; r < this.rows; r++) {
      const k = this.channel[r]!;
      if (k >= 0) {
        this.gain[r * C + k] = 1; // [R, C]: i = r*C + k
        this.offset[r * C + k] = 0;
      }
      this.skipped[r] = null;
    }
    this.rows = 0;
  }
}

/**
 * Measures one site: every channel's perturbed rows for every stimulus in `run.range`, summed per
 * (variant, channel, category), and the sensitivities computed from the sums.
 * @returns the site's block; `downstreamShare` and `forwardEquivalentsPerChannel` are NaN (the caller knows the MAC counts).
 * @throws RuntimeFailure when the runtime returns an unexpected readout or baseline batches are misaligned.
 */
export async function senseOneSite(run: SiteRun): Promise<SiteSensitivity> {
  const started = performance.now();
  const { site, tail, layer, readout, weights, kind, step } = run;
  // features along the site's layout: channels of a map ([C, H, W]: o = 1, inner = H·W), D of tokens ([T, D]: outer = T, inner = 1)
  const siteInfo = siteGeometryOf(layer);
  const C = siteInfo.features;
  const K = readout.categories.length;
  const Kout = run.byName.get(readout.tensor)!.elements;
  const boundary = tail.boundary;
  const boundaryShapes = boundary.map((name) => (name === run.model.input.name ? run.inspection.input.shape.slice(1) : run.byName.get(name)!.shape));
  const perRow = boundaryShapes.map((shape) => shape.reduce((a, b) => a * b, 1));
  const bytesPerRow = 4 * (perRow.reduce((a, b) => a + b, 0) + 2 * C);
  const variants = run.method === 'richardson' ? 4 : 2;
  const injection: InjectionSite = { site, shape: layer.shape, spatial: false, featureAxis: siteInfo.featureAxis };
  const injected = injectModulations(tail.model, [injection]);
  // rows per call: the feed buffers within feedBytes, and everything the call holds within runBytes
  const rowBytes = runRowBytes(injected, (name) => tensorElements(run, name.endsWith('::raw') ? name.slice(0, -5) : name), { fed: boundary.map((name) => (name === site ? `${name}::raw` : name)), fetched: [readout.tensor] });
  const capacity = rowsWithin(run.runBytes, rowBytes, Math.max(1, Math.min(run.rowsPerRun, Math.floor(run.feedBytes / (2 * bytesPerRow)))));
  const inputNames = modulationInputNames(site);
  const sumPerturbed = new Float64Array(variants * C * K); // [V, C, K]: i = (v*C + k)*K + c
  const sumIdentity = new Float64Array(K);
  const N = weights.weights.length / K;
  let used = 0;
  for (let s = 0; s < N; s++) {
    for (let c = 0; c < K; c++) {
      if (weights.weights[s * K + c]) {
        used++;
        break;
      }
    }
  }
  const rowsTotal = used * (1 + variants * C);
  let rowsDone = 0;
  let runs = 0;
  let tailSeconds = 0;
  let prefixSeconds = 0;
  let prefixRuns = 0;
  let prefixStimuli = 0;
  let skippedRows = 0;
  const siteIndex = boundary.indexOf(site);
  const { outer: siteOuter, inner: siteInner } = siteInfo;

  const session = await createNetworkSession(exposeForRuntime(injected, [readout.tensor]), { threads: run.threads, label: `${run.model.fileName} (downstream of ${site})` });
  const buffers = [new RowBuffer(capacity, perRow, C), new RowBuffer(capacity, perRow, C)];
  let current = 0;
  let pending: Promise<void> | null = null;

  const accumulate = (buffer: RowBuffer, y: Float32Array): void => {
    const units = readout.units;
    for (let r = 0; r < buffer.rows; r++) {
      const s = buffer.stimulus[r]!;
      const v = buffer.variant[r]!;
      const k = buffer.channel[r]!;
      const wBase = s * K;
      const yBase = r * Kout; // [R, Kout]: i = r*Kout + u
      if (v < 0) {
        for (let c = 0; c < K; c++) if (weights.weights[wBase + c]) sumIdentity[c] += y[yBase + units[c]!]!;
        // A channel that is exactly 0 at the site stays 0 under any gain: its perturbed rows equal this one.
        const skipped = buffer.skipped[r];
        if (skipped) {
          for (let j = 0; j < skipped.length; j++) {
            const kk = skipped[j]!;
            for (let vv = 0; vv < variants; vv++) {
              const base = (vv * C + kk) * K;
              for (let c = 0; c < K; c++) if (weights.weights[wBase + c]) sumPerturbed[base + c] += y[yBase + units[c]!]!;
            }
          }
        }
      } else {
        const base = (v * C + k) * K;
        for (let c = 0; c < K; c++) if (weights.weights[wBase + c]) sumPerturbed[base + c] += y[yBase + units[c]!]!;
      }
    }
  };

  const launch = async (buffer: RowBuffer): Promise<void> => {
    const rows = buffer.rows;
    const feeds: Record<string, FloatTensor> = {};
    boundary.forEach((name, i) => {
      const data = rows === buffer.capacity ? buffer.boundary[i]! : buffer.boundary[i]!.subarray(0, rows * perRow[i]!);
      feeds[name === site ? `${site}::raw` : name] = { data, dims: [rows, ...boundaryShapes[i]!] };
    });
    const dims = modulationInputDims(injection, rows);
    feeds[inputNames.gain] = { data: buffer.gain.subarray(0, rows * C), dims };
    feeds[inputNames.offset] = { data: buffer.offset.subarray(0, rows * C), dims };
    const t0 = performance.now();
    const outputs = await session.run(feeds, [readout.tensor]);
    tailSeconds += (performance.now() - t0) / 1000;
    const y = outputs[readout.tensor];
    if (!y || y.data.length !== rows * Kout) throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the downstream part of "${site}" returned ${y ? y.data.length : 0} readout values for ${rows} rows, expected ${rows * Kout}`);
    accumulate(buffer, y.data);
    buffer.clear();
    runs++;
    rowsDone += rows;
    run.onProgress?.({ site, rowsDone: rowsDone + skippedRows, rowsTotal });
  };

  const flush = async (): Promise<void> => {
    const buffer = buffers[current]!;
    if (buffer.rows === 0) return;
    if (pending) await pending;
    pending = launch(buffer);
    pending.catch(() => undefined); // surfaced when awaited
    current = 1 - current;
  };

  const addRow = async (stimulus: StimulusValues, k: number, v: number, skipped: Int32Array | null = null): Promise<void> => {
    let buffer = buffers[current]!;
    if (buffer.rows === buffer.capacity) {
      await flush(); // waits for the other buffer's run, so the buffer switched to is empty
      buffer = buffers[current]!;
    }
    const r = buffer.rows++;
    for (let i = 0; i < perRow.length; i++) buffer.boundary[i]!.set(stimulus.values[i]!, r * perRow[i]!);
    buffer.stimulus[r] = stimulus.index;
    buffer.channel[r] = k;
    buffer.variant[r] = v;
    buffer.skipped[r] = skipped;
    if (k >= 0) {
      const delta = VARIANT_SIGN[v]! * step;
      if (kind === 'gain') buffer.gain[r * C + k] = 1 + delta;
      else buffer.offset[r * C + k] = delta;
    }
  };

  const processStimulus = async (stimulus: StimulusValues): Promise<void> => {
    let needed = false;
    for (let c = 0; c < K; c++) if (weights.weights[stimulus.index * K + c]) needed = true;
    if (!needed) return;
    // Gain kind: a channel whose site values are all exactly 0 for this stimulus gives x·(1 ± h) = 0 =
    // x·1, so its perturbed runs would repeat the unperturbed one bit for bit; they are not run.
    let skipped: Int32Array | null = null;
    if (kind === 'gain') {
      const values = stimulus.values[siteIndex]!;
      const dead: number[] = [];
      for (let k = 0; k < C; k++) {
        let zero = true;
        // element (o·C + k)·inner + i of the layout geometry
        for (let o = 0; o < siteOuter && zero; o++) {
          for (let p = (o * C + k) * siteInner, end = p + siteInner; p < end; p++) {
            if (values[p] !== 0) {
              zero = false;
              break;
            }
          }
        }
        if (zero) dead.push(k);
      }
      if (dead.length > 0) skipped = Int32Array.from(dead);
    }
    await addRow(stimulus, -1, -1, skipped);
    let next = 0;
    for (let k = 0; k < C; k++) {
      if (skipped && next < skipped.length && skipped[next] === k) {
        next++;
        skippedRows += variants;
        continue;
      }
      for (let v = 0; v < variants; v++) await addRow(stimulus, k, v);
    }
  };

  try {
    // Double buffering: while the runtime computes one buffer's rows, the other is filled.
    const stimuli = boundaryStream(run, boundary);
    for await (const batch of stimuli) {
      prefixSeconds += batch.prefixSeconds;
      prefixRuns += batch.prefixRuns;
      if (batch.prefixRuns > 0) prefixStimuli += batch.stimuli.length;
      for (const stimulus of batch.stimuli) await processStimulus(stimulus);
    }
    await flush();
    if (pending) await pending;
  } finally {
    await session.close();
  }

  const counts = weights.counts;
  const { sensitivity, fdError, extrapolationShift } = sensitivityFromSums({ variants, perturbed: sumPerturbed, identity: sumIdentity, counts }, C, K, step);
  return {
    layer: site,
    depth: layer.depth,
    op: layer.op,
    channels: C,
    unit: siteInfo.unit,
    categories: [...readout.categories],
    sensitivity,
    fdError,
    kind,
    step,
    method: run.method,
    extrapolationShift,
    count: Int32Array.from(counts),
    worstErrorRatio: 0,
    runs,
    rows: rowsDone,
    skippedRows,
    prefixRuns,
    tailSeconds,
    prefixSeconds,
    wallSeconds: (performance.now() - started) / 1000,
    downstreamShare: Number.NaN,
    forwardEquivalentsPerChannel: Number.NaN,
    prefixStimuli,
    stimuliUsed: used,
    ...(run.keepSums ? { sums: { variants, perturbed: sumPerturbed, identity: sumIdentity, counts: Int32Array.from(counts) } } : {}),
  };
}

/** One batch of stimuli with their boundary tensors, and what computing them cost. */
export interface BoundaryBatch {
  stimuli: StimulusValues[];
  prefixSeconds: number;
  prefixRuns: number;
}

/** Streams each stimulus's boundary tensors: from the baseline's layer files, or by running the network. */
export async function* boundaryStream(run: SiteRun, boundary: readonly string[]): AsyncGenerator<BoundaryBatch> {
  const perRow = boundary.map((name) => (name === run.model.input.name ? run.inspection.input.shape.slice(1) : run.byName.get(name)!.shape).reduce((a, b) => a * b, 1));
  if (run.baseline) {
    const baseline = run.baseline;
    // stimulus indices are local (0-based within the snapshot, which may be a shard)
    const offset = baseline.firstIndex;
    const read = run.range ? { range: [offset + run.range[0], offset + run.range[1]] as [number, number] } : {};
    const streams = boundary.map((name) => baseline.readLayer(name, read));
    try {
      for (;;) {
        const parts = await Promise.all(streams.map((s) => s.next()));
        const first = parts[0]!.value as LayerBatch | undefined;
        if (!first) break;
        const batches = parts.map((part, i) => {
          const batch = part.value as LayerBatch | undefined;
          if (!batch || batch.rows !== first.rows || batch.index[0] !== first.index[0]) throw new RuntimeFailure('E_LAYER_READ', `baseline layer "${boundary[i]}" is not aligned with "${boundary[0]}" (batch structure differs)`);
          return batch;
        });
        const stimuli: StimulusValues[] = [];
        for (let r = 0; r < first.rows; r++) {
          stimuli.push({ index: first.index[r]! - offset, values: batches.map((b, i) => b.activation!.subarray(r * perRow[i]!, (r + 1) * perRow[i]!)) });
        }
        yield { stimuli, prefixSeconds: 0, prefixRuns: 0 };
      }
    } finally {
      await Promise.all(streams.map((s) => s.return(undefined)));
    }
    return;
  }
  const source = run.source!;
  const inputName = run.model.input.name;
  const fetched = boundary.filter((name) => name !== inputName);
  const session: NetworkSession = await createNetworkSession(exposeForRuntime(run.model, fetched), { threads: run.threads, label: run.model.fileName });
  try {
    const [c, h, w] = source.shape;
    const per = c * h * w;
    const [from, to] = run.range ?? [0, source.count];
    for (let first = from; first < to; first += run.batch) {
      const rows = Math.min(run.batch, to - first);
      const input = new Float32Array(rows * per);
      await source.read(first, rows, input);
      const t0 = performance.now();
      const outputs = await session.run({ [inputName]: { data: input, dims: [rows, c, h, w] } }, fetched);
      const seconds = (performance.now() - t0) / 1000;
      const arrays = boundary.map((name) => {
        if (name === inputName) return input;
        const tensor = outputs[name];
        if (!tensor) throw new RuntimeFailure('E_RUNTIME_OUTPUT', `the runtime returned no value for "${name}"`);
        return tensor.data;
      });
      const stimuli: StimulusValues[] = [];
      for (let r = 0; r < rows; r++) stimuli.push({ index: first + r, values: arrays.map((a, i) => a.subarray(r * perRow[i]!, (r + 1) * perRow[i]!)) });
      yield { stimuli, prefixSeconds: seconds, prefixRuns: 1 };
    }
  } finally {
    await session.close();
  }
}

/**
 * A site's feature geometry for sensitivities: features F along its layout, the positions outside
 * (outer) and inside (inner) the feature axis, and the feature axis of the per-stimulus shape.
 * @throws UsageError when the layer has no feature axis (a scalar per stimulus).
 */
export function siteGeometryOf(layer: LayerInfo): { features: number; outer: number; inner: number; featureAxis: number; shape: SiteShape; unit: 'channel' | 'feature' } {
  const shape = siteShapes([layer]).get(layer.name);
  if (!shape) throw new UsageError('E_SENSE_SITE', `--site "${layer.name}" has no feature axis (shape [${layer.shape.join(', ')}] per stimulus)`, { hint: 'pick a feature map, a token tensor or a vector layer' });
  const g = siteGeometry(shape);
  const unit = shape.layout.kind === 'tokens' ? 'feature' : 'channel';
  return { features: g.features, outer: g.outer, inner: g.inner, featureAxis: shape.layout.featureAxis ?? 0, shape, unit };
}

/** Per-stimulus elements of a tensor of the run's network (the data input included), or undefined. */
export function tensorElements(run: SiteRun, name: string): number | undefined {
  if (name === run.model.input.name) return run.inspection.input.shape.slice(1).reduce((a, b) => a * b, 1);
  return run.byName.get(name)?.elements;
}
