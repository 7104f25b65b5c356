/**
 * `scoreGains`: the readout of every stimulus of a baseline under many per-channel gain patterns, each
 * applied at one or several sites at once. Only the network part downstream of the sites runs, fed with
 * the baseline's recorded tensors (the tail replay of `record-modulated` and `sweep`); several patterns
 * share one runtime call (rows = patterns × stimuli). Used by the gain ceiling (finite-difference
 * derivatives and fitted gains) and by the size-matched scheme comparison (one site or all at once).
 */
import { UsageError } from '../errors.js';
import { exposeForRuntime } from '../graph/instrument.js';
import { injectModulations, modulationInputDims, modulationInputNames, type InjectionSite } from '../graph/inject.js';
import type { LoadedModel } from '../graph/load-model.js';
import { createNetworkSession } from '../session/network-session.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import type { ModelInspection } from '../record/inspect-model.js';
import { planTail } from '../record/record-modulated.js';
import { runPipelined } from '../record/record-snapshot.js';
import { replicateBoundaryFeeds } from './replicate-feeds.js';
import { evenRows, runBytesOption, runRowBytes, rowsWithin } from '../graph/run-memory.js';
import { siteGeometryOf } from './sense-run.js';

/** Options of `scoreGains`. */
export interface GainScoringOptions {
  model: LoadedModel;
  inspection: ModelInspection;
  /** The recorded stimuli the network is replayed on (sites and the tail's inputs at full float32 resolution). */
  baseline: Snapshot;
  /** Sites the gains are applied at (each once). */
  sites: readonly string[];
  /** Gain patterns: pattern p gives one vector per site, `gains[p][s]` of the site's channel count. */
  gains: readonly (readonly Float32Array[])[];
  /** Readout tensor whose values are returned (per stimulus: its channel means, e.g. one logit per unit). */
  readout: string;
  /** Patterns evaluated per runtime call (default 16; fewer where a call would hold more than `runBytes`). */
  patternsPerRun?: number;
  /** Bytes of tensors one runtime call may hold (default `DEFAULT_RUN_BYTES`, src/graph/run-memory.ts). */
  runBytes?: number;
  /** Runtime threads (0: the runtime chooses). */
  threads?: number;
}

/**
 * Runs the downstream part once per group of patterns over all the baseline's stimuli.
 * @returns per pattern, the readout [n, units] (row-major: i*units + u), in the baseline's stimulus order.
 * @throws UsageError when a gain vector has the wrong length or the downstream part needs tensors the
 *   baseline did not record at full float32 resolution (the reason is named); RuntimeFailure when the
 *   baseline's layer files are not aligned.
 */
export async function scoreGains(options: GainScoringOptions): Promise<Float64Array[]> {
  const { baseline, sites, gains, readout } = options;
  const shapes = sites.map((site) => baseline.layer(site).shape);
  // features along each site's layout (channels of a map, D of tokens) and the dims of its G input
  const byName = new Map(options.inspection.layers.map((l) => [l.name, l]));
  const geometry = sites.map((site, s) => {
    const layer = byName.get(site);
    return layer ? siteGeometryOf(layer) : { features: shapes[s]![0]!, featureAxis: 0 };
  });
  gains.forEach((pattern, p) => {
    if (pattern.length !== sites.length) throw new UsageError('E_GAINS', `gain pattern ${p} has ${pattern.length} vectors for ${sites.length} sites`);
    pattern.forEach((vector, s) => {
      if (vector.length !== geometry[s]!.features) throw new UsageError('E_GAINS', `gain pattern ${p} at "${sites[s]}" has ${vector.length} values; the site has ${geometry[s]!.features} features`);
    });
  });
  const plan = planTail(options.model, options.inspection, baseline, [...sites], [readout]);
  if (!('tail' in plan)) throw new UsageError('E_GAINS_TAIL', `gains at ${sites.join(', ')}: ${plan.reason}`, { hint: 'record the baseline with --keep full --dtype float32 and the default (or a wider) --layers selector' });
  const tail = plan.tail;
  const injections: InjectionSite[] = sites.map((site, s) => ({ site, shape: shapes[s]!, spatial: false, featureAxis: geometry[s]!.featureAxis }));
  const injected = injectModulations(tail.model, injections);
  const session = await createNetworkSession(exposeForRuntime(injected, [readout]), { threads: options.threads ?? 0, label: `${options.model.fileName} downstream of ${sites.join(', ')}` });
  const n = baseline.manifest.stimuli.count;
  const units = baseline.layerGeometry(readout).channels;
  const results = gains.map(() => new Float64Array(n * units));
  // patterns per call within the run bytes: a call holds patterns × a baseline batch of rows
  const batchRows = baseline.manifest.run.batch;
  const elementsOf = new Map(options.inspection.layers.map((l) => [l.name, l.elements]));
  const rowBytes = runRowBytes(injected, (name) => elementsOf.get(name.endsWith('::raw') ? name.slice(0, -5) : name), { fed: tail.boundary.map((name) => (sites.includes(name) ? `${name}::raw` : name)), fetched: [readout] });
  const requested = options.patternsPerRun ?? 16;
  const perRun = evenRows(Math.min(requested, gains.length), Math.max(1, Math.floor(rowsWithin(runBytesOption(options.runBytes), rowBytes, requested * batchRows) / batchRows)));
  const siteSet = new Set(sites);
  try {
    for (let start = 0; start < gains.length; start += perRun) {
      const group = gains.slice(start, start + perRun);
      const M = group.length;
      const streams = tail.boundary.map((name) => baseline.readLayer(name));
      try {
        await runPipelined(
          Math.ceil(n / baseline.manifest.run.batch),
          async () => {
            const parts = await Promise.all(streams.map((s) => s.next()));
            const { rows, firstBatch, feeds } = replicateBoundaryFeeds(parts, tail.boundary, siteSet, M, baseline);
            sites.forEach((site, s) => {
              const C = geometry[s]!.features;
              const gain = new Float32Array(M * rows * C);
              for (let m = 0; m < M; m++) for (let i = 0; i < rows; i++) gain.set(group[m]![s]!, (m * rows + i) * C);
              const dims = modulationInputDims(injections[s]!, M * rows);
              const names = modulationInputNames(site);
              feeds[names.gain] = { data: gain, dims };
              feeds[names.offset] = { data: new Float32Array(M * rows * C), dims };
            });
            return { first: firstBatch.index[0]! - baseline.firstIndex, rows, feeds };
          },
          (feeds) => session.run(feeds, [readout]),
          (first, rows, outputs) => {
            const out = outputs[readout]!.data;
            const per = out.length / (M * rows);
            const spatial = per / units;
            // readout [M*rows, units, ...spatial]: channel means per stimulus
            for (let m = 0; m < M; m++) {
              const target = results[start + m]!;
              for (let i = 0; i < rows; i++) {
                const base = (m * rows + i) * per;
                for (let u = 0; u < units; u++) {
                  let sum = 0;
                  for (let x = 0; x < spatial; x++) sum += out[base + u * spatial + x]!;
                  target[(first + i) * units + u] = sum / spatial;
                }
              }
            }
          },
        );
      } finally {
        await Promise.all(streams.map((s) => s.return(undefined)));
      }
    }
  } finally {
    await session.close();
  }
  return results;
}
