/**
 * Sensitivities over shards: each shard keeps, per site, the readout sums of its stimuli (the sums the
 * sensitivities are linear in, `SensitivitySums`), so the merged result is the unsharded one up to
 * rounding in the last digits. Envelope and shard-order check: src/record/partial-file.ts.
 */
import { UsageError } from '../errors.js';
import { decodeArray, encodeArray, partialObject, PARTIAL_KIND, PARTIAL_VERSION, type OrderedPart, type PartialFile, type PartialShard } from '../record/partial-file.js';
import type { ShardSpec } from '../record/shard.js';
import { writeSensitivityTable } from '../snapshot/tables.js';
import { errorCheck, sensitivityFromSums } from './sense-estimate.js';
import { DEFAULT_WARN_RATIO, type SenseMethod, type SenseOptions, type SenseResult, type SiteSensitivity } from './sense-types.js';
import { senseSites } from './sense.js';


/**
 * Measures shard `shard` of a sensitivity run: per site the readout sums of the shard's stimuli.
 * @throws UsageError as `senseSites` does.
 */
export async function sensePartial(options: SenseOptions, shard: ShardSpec): Promise<PartialFile> {
  const { out: _out, ...rest } = options;
  const result = await senseSites({ ...rest, shard });
  const [start, end] = result.range;
  const info: PartialShard = { index: shard.index, count: shard.count, stimuli: [start, end - 1], total: result.stimuli };
  const key = {
    metadata: result.metadata,
    readout: result.readout,
    source: result.source,
    warnRatio: options.warnRatio ?? DEFAULT_WARN_RATIO,
    method: options.method ?? 'exact',
    sites: result.sites.map((b) => [b.layer, b.kind, b.step, b.channels]),
  };
  const sites = result.sites.map((block) => {
    const { sensitivity: _s, fdError: _e, extrapolationShift: _x, sums, count, ...fields } = block;
    return { ...fields, count: encodeArray(count), sums: { variants: sums!.variants, perturbed: encodeArray(sums!.perturbed), identity: encodeArray(sums!.identity), counts: encodeArray(sums!.counts) } };
  });
  return { kind: PARTIAL_KIND, version: PARTIAL_VERSION, of: 'sense', shard: info, key, data: { sites } };
}

/** Adds up the shards' sums per site and derives sensitivities, errors, costs and warnings. */
export function mergeSensePartials(ordered: readonly OrderedPart[], options: { out?: string } = {}): SenseResult {
  const key = ordered[0]!.part.key as { metadata: Record<string, string>; readout: SenseResult['readout']; source: SenseResult['source']; warnRatio: number; method?: SenseMethod };
  const perPart = ordered.map(({ part, path }) => {
    const sites = part.data['sites'];
    if (!Array.isArray(sites)) throw new UsageError('E_PARTIAL', `${path}: data.sites must be a list`);
    return sites.map((value: unknown, i: number) => {
      const at = `${path}: data.sites[${i}]`;
      const b = partialObject(value, at);
      const sums = partialObject(b['sums'], `${at}.sums`);
      return {
        fields: b,
        variants: Number(sums['variants']),
        perturbed: decodeArray(sums['perturbed'], 'f64', `${at}.sums.perturbed`),
        identity: decodeArray(sums['identity'], 'f64', `${at}.sums.identity`),
        counts: decodeArray(sums['counts'], 'i32', `${at}.sums.counts`),
      };
    });
  });
  const blocks: SiteSensitivity[] = perPart[0]!.map((firstSite, i) => {
    const f = firstSite.fields;
    const C = Number(f['channels']);
    const categories = (f['categories'] as unknown[]).map(String);
    const K = categories.length;
    const perturbed = new Float64Array(firstSite.perturbed.length);
    const identity = new Float64Array(firstSite.identity.length);
    const counts = new Int32Array(firstSite.counts.length);
    const total = { runs: 0, rows: 0, skippedRows: 0, prefixRuns: 0, prefixStimuli: 0, tailSeconds: 0, prefixSeconds: 0, wallSeconds: 0, stimuliUsed: 0 };
    for (const sites of perPart) {
      const site = sites[i]!;
      if (site.perturbed.length !== perturbed.length || site.counts.length !== counts.length) throw new UsageError('E_PAIRING', `site ${String(f['layer'])}: the shards' sums have different sizes`);
      for (let j = 0; j < perturbed.length; j++) perturbed[j] += site.perturbed[j]!;
      for (let j = 0; j < identity.length; j++) identity[j] += site.identity[j]!;
      for (let j = 0; j < counts.length; j++) counts[j] += site.counts[j]!;
      for (const name of Object.keys(total) as Array<keyof typeof total>) total[name] += Number(site.fields[name]);
    }
    const step = Number(f['step']);
    const { sensitivity, fdError, extrapolationShift } = sensitivityFromSums({ variants: firstSite.variants, perturbed, identity, counts }, C, K, step);
    const share = Number(f['downstreamShare']);
    const block: SiteSensitivity = {
      layer: String(f['layer']),
      depth: Number(f['depth']),
      op: String(f['op']),
      channels: C,
      categories,
      sensitivity,
      fdError,
      kind: f['kind'] === 'offset' ? 'offset' : 'gain',
      step,
      method: firstSite.variants === 1 ? 'exact' : extrapolationShift ? 'richardson' : 'secant', // 1 variant is exact, 4 step variants are Richardson's, 2 the secant's
      extrapolationShift,
      count: counts,
      worstErrorRatio: 0,
      ...total,
      downstreamShare: share,
      forwardEquivalentsPerChannel: (total.rows * share * (firstSite.variants === 1 ? 3 : 1) + total.prefixStimuli) / (C * total.stimuliUsed),
    };
    const check = errorCheck(block, key.warnRatio);
    block.worstErrorRatio = check.worst;
    if (check.warning) block.warning = check.warning;
    return block;
  });
  const total = ordered[0]!.part.shard.total;
  const result: SenseResult = { sites: blocks, readout: key.readout, source: key.source, warnings: blocks.flatMap((b) => (b.warning ? [b.warning] : [])), stimuli: total, range: [0, total], metadata: key.metadata };
  if (options.out !== undefined) result.file = { path: options.out, ...writeSensitivityTable(options.out, blocks, key.metadata) };
  return result;
}
