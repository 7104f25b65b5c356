/**
 * `windowSpatialProfiles`: for a modulation with a spatial window, the spatial profile of the change
 * (`analysis/spatial-profile.ts`) at every spatial layer at or below the site — relative change within
 * rings of equal distance from the window's centre — read from a baseline and a modulated snapshot.
 * Reads at most `stimuli` stimuli of each layer (the first ones; fewer where both sides would exceed
 * 256 MiB), so its cost does not grow with the set and its memory stays bounded on large maps.
 */
import { SpatialProfileAccumulator, type SpatialRing } from '../analysis/spatial-profile.js';
import type { Snapshot } from '../snapshot/snapshot.js';
import { layerLayout } from '../snapshot/manifest.js';

/** A window as the manifest records it (map-relative units). */
export type WindowRecord = { shape: 'box'; x0: number; x1: number; y0: number; y1: number } | { shape: 'gaussian'; cx: number; cy: number; sigma: number };

/** The profile of one layer. */
export interface LayerSpatialProfile {
  layer: string;
  /** Stimuli accumulated. */
  stimuli: number;
  rings: SpatialRing[];
}

/** What `windowSpatialProfiles` returns. */
export interface WindowSpatialProfiles {
  site: string;
  window: WindowRecord;
  /** The centre the distances are measured from (the box's middle, or the Gaussian's centre). */
  centre: { x: number; y: number };
  layers: LayerSpatialProfile[];
}

/** The first modulation's site and window from a manifest's `modulation` record, when it has a window. */
export function windowOf(modulation: unknown): { site: string; window: WindowRecord } | null {
  const first = (modulation as { modulations?: Array<{ site?: unknown; window?: Record<string, unknown> | null }> } | null)?.modulations?.[0];
  const w = first?.window;
  if (!w || typeof first?.site !== 'string') return null;
  const numbers = (...keys: string[]) => keys.every((k) => typeof w[k] === 'number');
  if (w['shape'] === 'box' && numbers('x0', 'x1', 'y0', 'y1')) return { site: first.site, window: { shape: 'box', x0: w['x0'] as number, x1: w['x1'] as number, y0: w['y0'] as number, y1: w['y1'] as number } };
  if (w['shape'] === 'gaussian' && numbers('cx', 'cy', 'sigma')) return { site: first.site, window: { shape: 'gaussian', cx: w['cx'] as number, cy: w['cy'] as number, sigma: w['sigma'] as number } };
  return null;
}

/** Most bytes of activations held at once for one layer (both snapshots). */
const MEMORY_BUDGET_BYTES = 256 * 2 ** 20;

async function firstStimuli(snapshot: Snapshot, layer: string, limit: number): Promise<Map<number, Float32Array>> {
  const { elements } = snapshot.layerGeometry(layer);
  const out = new Map<number, Float32Array>();
  for await (const batch of snapshot.readLayer(layer)) {
    for (let r = 0; r < batch.rows && out.size < limit; r++) if (batch.activation) out.set(batch.index[r]! - snapshot.firstIndex, batch.activation.slice(r * elements, (r + 1) * elements));
    if (out.size >= limit) break;
  }
  return out;
}

/**
 * Spatial profiles of a windowed modulation (see the module comment).
 * @param base the baseline snapshot; @param mod the modulated one (recorded `--from` it).
 * @param options stimuli per layer (default 64), rings (default 6, equal widths out to the map corner farthest from the centre, the same for every layer), most layers (default 12).
 * @returns null when the modulation has no window or its site is not a recorded layer.
 */
export async function windowSpatialProfiles(base: Snapshot, mod: Snapshot, options: { stimuli?: number; rings?: number; layers?: number } = {}): Promise<WindowSpatialProfiles | null> {
  const found = windowOf(mod.manifest.modulation);
  if (!found) return null;
  const { site, window } = found;
  const siteEntry = base.manifest.layers.find((l) => l.name === site);
  if (!siteEntry) return null;
  const centre = window.shape === 'box' ? { x: (window.x0 + window.x1) / 2, y: (window.y0 + window.y1) / 2 } : { x: window.cx, y: window.cy };
  const spatialLayers = base.manifest.layers.filter((l) => l.depth >= siteEntry.depth && l.keep === 'full' && l.shape.length === 3 && l.shape[1]! * l.shape[2]! > 1 && isChannelsFirst(l)).slice(0, options.layers ?? 12);
  const outer = Math.hypot(Math.max(centre.x, 1 - centre.x), Math.max(centre.y, 1 - centre.y));
  const layers: LayerSpatialProfile[] = [];
  for (const layer of spatialLayers) {
    const [channels, height, width] = layer.shape as [number, number, number];
    // the same rings for every layer: equal widths out to the map corner farthest from the centre
    const accumulator = new SpatialProfileAccumulator(channels, height, width, centre.x, centre.y, options.rings ?? 6, outer);
    // both sides of at most `stimuli` stimuli are held at once: cap them at 256 MiB per layer (a 224 px
    // VGG16 conv1 map is 12.8 MB a stimulus, so 10 stimuli there; the demo's maps take all 64)
    const bytesPerStimulus = 2 * 4 * channels * height * width;
    const limit = Math.max(1, Math.min(options.stimuli ?? 64, Math.floor(MEMORY_BUDGET_BYTES / bytesPerStimulus)));
    const a = await firstStimuli(base, layer.name, limit);
    const b = await firstStimuli(mod, layer.name, limit);
    let used = 0;
    for (const [n, values] of a) {
      const other = b.get(n);
      if (!other) continue;
      accumulator.add(values, other);
      used++;
    }
    layers.push({ layer: layer.name, stimuli: used, rings: accumulator.result() });
  }
  return { site, window, centre, layers };
}

/** Maps with features on axis 0 ([C, H, W]): the layout the ring kernel reads (token and channels-last layers are left out). */
function isChannelsFirst(entry: Parameters<typeof layerLayout>[0]): boolean {
  const layout = layerLayout(entry);
  return layout.kind === 'channels-first' && layout.featureAxis === 0;
}
