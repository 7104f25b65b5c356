/**
 * Per-head sensitivities: the derivative with respect to one gain shared by all d features of a head is
 * the sum of the per-feature derivatives (chain rule: ∂y/∂g_h = Σ_{f ∈ h} ∂y/∂g_f at g = 1), so a site's
 * [F, K] block folds exactly into [H, K] — head h holding features h·d … h·d + d − 1 of the
 * concatenated heads (d = F / H). Heads are separate features only before the attention's output
 * projection; the head count comes from `modulationSites` (traced from the graph, or a sidecar layout).
 */
import { UsageError } from '../errors.js';
import type { ModelInspection } from '../record/inspect-model.js';
import { modulationSites } from '../record/site-shapes.js';
import type { SiteSensitivity } from './sense-types.js';

/**
 * Folds a per-feature block into one row per head, in place of its sensitivity, step-error indicators
 * and channel count.
 * @param block A measured block with `channels` = F features ([F, K]: i = f*K + c).
 * @param heads H, which must divide F.
 * @returns A new block with `channels` = H, `unit` = head; the indicators (fd_error, extrapolation
 *   shift) are summed too, an upper bound of the folded error.
 * @throws UsageError when H does not divide F, or the block carries shard sums (fold after merging).
 */
export function foldHeads(block: SiteSensitivity, heads: number): SiteSensitivity {
  const F = block.channels;
  const K = block.categories.length;
  if (!Number.isSafeInteger(heads) || heads < 1 || F % heads !== 0) {
    throw new UsageError('E_SENSE_PER', `--per head: ${heads} heads do not divide the ${F} features of "${block.layer}"`);
  }
  if (block.sums !== undefined) throw new UsageError('E_SENSE_PER', '--per head cannot be combined with --shard/--partial: merge the shards per feature, then sum each head\'s features');
  const d = F / heads;
  const fold = (values: Float64Array): Float64Array => {
    const out = new Float64Array(heads * K); // [H, K]: i = h*K + c
    for (let f = 0; f < F; f++) {
      const h = Math.floor(f / d);
      for (let c = 0; c < K; c++) out[h * K + c] += values[f * K + c]!;
    }
    return out;
  };
  return {
    ...block,
    channels: heads,
    unit: 'head',
    sensitivity: fold(block.sensitivity),
    fdError: fold(block.fdError),
    extrapolationShift: block.extrapolationShift === null ? null : fold(block.extrapolationShift),
  };
}

/**
 * The heads of a site for `--per head`.
 * @throws UsageError naming the site when its head count is not known (not a multi-head tensor before
 *   an output projection, and no sidecar layout declares heads).
 */
export function siteHeads(inspection: ModelInspection, site: string): number {
  const heads = modulationSites(inspection).get(site)?.heads;
  if (heads === undefined) {
    throw new UsageError('E_SENSE_PER', `--per head: the heads of "${site}" are not known (it is not a multi-head tensor before an attention output projection)`, {
      hint: 'pick the tensor an attention output projection reads, or declare its heads in the sidecar\'s layouts',
    });
  }
  return heads;
}
