/**
 * Whether schemes compared at equal strength changed their sites by the same amount. Two gain schemes
 * at one strength β generally move the site's activity by different amounts (their value patterns
 * differ), so a larger detection change may only mean a larger modulation. `diff --vs` and `sweep`
 * compare at equal strength; these checks say when the sizes differ by more than a tolerance and point
 * to the comparison at one size (`sonde size-matched`).
 */
import type { DiffReport } from './diff-types.js';

/** Default tolerance: sizes within 5 % of the larger one count as matched (common practice for "about equal"; our choice). */
export const SIZE_TOLERANCE = 0.05;

/** One scheme's size of site change at one site and strength. */
export interface SchemeSize {
  site: string;
  scheme: string;
  /** Strength β; null where the schemes were not given by a strength (two recordings). */
  strength: number | null;
  /** Size of the change at the site (relative change, or the sweep's site activity change), ≥ 0. */
  size: number;
}

/** The largest size gap among the schemes at one site and strength. */
export interface SizeGap {
  site: string;
  strength: number | null;
  /** Scheme with the smallest and the largest size, with their sizes. */
  smaller: { scheme: string; size: number };
  larger: { scheme: string; size: number };
  /** (larger − smaller) / larger; 0 when both are 0. */
  gap: number;
}

/**
 * Groups sizes by site and strength (several rows of one scheme, e.g. per category, are averaged) and
 * returns the groups whose smallest and largest scheme differ by more than `tolerance` of the larger,
 * largest gap first. Strength 0 and groups with a single scheme are skipped; a non-finite size makes its
 * group a gap of NaN, reported (never silently dropped).
 * @param rows sizes per site, scheme and strength.
 * @param tolerance relative tolerance (default `SIZE_TOLERANCE`).
 */
export function sizeGaps(rows: readonly SchemeSize[], tolerance = SIZE_TOLERANCE): SizeGap[] {
  const groups = new Map<string, { site: string; strength: number | null; sums: Map<string, { total: number; count: number }> }>();
  for (const row of rows) {
    if (row.strength === 0) continue;
    const key = `${row.site}\u0000${row.strength}`;
    let group = groups.get(key);
    if (!group) groups.set(key, (group = { site: row.site, strength: row.strength, sums: new Map() }));
    const sum = group.sums.get(row.scheme) ?? { total: 0, count: 0 };
    sum.total += row.size;
    sum.count += 1;
    group.sums.set(row.scheme, sum);
  }
  const gaps: SizeGap[] = [];
  for (const group of groups.values()) {
    if (group.sums.size < 2) continue;
    const means = [...group.sums].map(([scheme, s]) => ({ scheme, size: s.total / s.count }));
    if (means.some((m) => !Number.isFinite(m.size))) {
      gaps.push({ site: group.site, strength: group.strength, smaller: means[0]!, larger: means[1]!, gap: Number.NaN });
      continue;
    }
    means.sort((a, b) => a.size - b.size);
    const smaller = means[0]!;
    const larger = means[means.length - 1]!;
    const gap = larger.size > 0 ? (larger.size - smaller.size) / larger.size : 0;
    if (gap > tolerance) gaps.push({ site: group.site, strength: group.strength, smaller, larger, gap });
  }
  return gaps.sort((a, b) => (Number.isNaN(b.gap) ? 1 : 0) - (Number.isNaN(a.gap) ? 1 : 0) || b.gap - a.gap);
}

/**
 * One line saying that schemes compared at equal strength are not size-matched, naming the largest gap
 * and the command that compares at one size; null when every gap is within the tolerance.
 * @param gaps from `sizeGaps`.
 * @param what what the size is ("relative change at the site", "site activity change").
 * @param tolerance the tolerance the gaps were found with (for the message).
 */
export function sizeGapNote(gaps: readonly SizeGap[], what: string, tolerance = SIZE_TOLERANCE): string | null {
  const top = gaps[0];
  if (!top) return null;
  const pct = (x: number) => `${(100 * x).toFixed(1)} %`;
  const where = `${top.site}${top.strength !== null ? `, β ${top.strength}` : ''}`;
  const detail = Number.isNaN(top.gap)
    ? `at ${where} a size is not finite`
    : `at ${where}, ${what} ${pct(top.smaller.size)} with ${top.smaller.scheme} vs ${pct(top.larger.size)} with ${top.larger.scheme} (${pct(top.gap)} apart, tolerance ${pct(tolerance)})`;
  const more = gaps.length > 1 ? `; ${gaps.length - 1} more site/strength pair${gaps.length > 2 ? 's' : ''} differ too` : '';
  return `not size-matched: ${detail}${more}. A larger detection change may only mean a larger modulation; compare the schemes at one size with \`sonde size-matched\``;
}

/**
 * The sizes of two diffs' changes at their own sites, as rows for `sizeGaps`: scheme `A` and `B`, the
 * size the mean relative change over each one's recorded site layers. Empty when either diff has no
 * recorded site layer (nothing to compare).
 */
export function diffSiteSizes(a: Pick<DiffReport, 'sites' | 'layers'>, b: Pick<DiffReport, 'sites' | 'layers'>): SchemeSize[] {
  const sizeOf = (report: Pick<DiffReport, 'layers'>): number | null => {
    const rows = report.layers.filter((l) => l.site);
    return rows.length === 0 ? null : rows.reduce((s, l) => s + l.relativeChange, 0) / rows.length;
  };
  const sa = sizeOf(a);
  const sb = sizeOf(b);
  if (sa === null || sb === null) return [];
  const sameSites = a.sites.length === b.sites.length && a.sites.every((site) => b.sites.includes(site));
  const site = sameSites ? a.sites.join('+') : "each scheme's own sites";
  return [
    { site, scheme: 'A', strength: null, size: sa },
    { site, scheme: 'B', strength: null, size: sb },
  ];
}
