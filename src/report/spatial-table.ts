/**
 * Terminal print-out of the spatial profiles of a windowed modulation (`compare/spatial-profiles.ts`):
 * one row per spatial layer at or below the site, one column per ring of distance from the window's
 * centre, the relative change in each; fitted to the width like every table.
 */
import type { WindowSpatialProfiles } from '../compare/spatial-profiles.js';
import { compact } from '../format.js';
import { shortLayerLabels } from './layer-labels.js';
import { fitTable, wrapText } from './terminal-table.js';

/**
 * @param profiles from `windowSpatialProfiles`.
 * @param options width: terminal columns to fit (default: no limit).
 * @returns the text (a heading line, the table, a note), ending in a newline; empty without layers.
 */
export function renderSpatialProfiles(profiles: WindowSpatialProfiles, options: { width?: number } = {}): string {
  if (profiles.layers.length === 0) return '';
  const width = options.width ?? Number.POSITIVE_INFINITY;
  const labels = shortLayerLabels(profiles.layers.map((l) => l.layer));
  // every layer has the same rings (compare/spatial-profiles.ts): the first layer's edges head the columns
  const head = ['layer', ...profiles.layers[0]!.rings.map((r) => `${r.from.toFixed(2)}–${r.to.toFixed(2)}`)];
  const rows = profiles.layers.map((l) => [labels.get(l.layer)!, ...l.rings.map((r) => compact(r.relativeChange))]);
  const heading = wrapText(`spatial profile: relative change by distance from the window centre (${profiles.centre.x.toFixed(2)}, ${profiles.centre.y.toFixed(2)}), map widths, over the first ${Math.max(...profiles.layers.map((l) => l.stimuli))} stimuli`, width, '  ');
  return `\n${heading}\n${fitTable(head, rows, { width, keyColumns: 1 })}\n`;
}
