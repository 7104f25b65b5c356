/**
 * What `sonde check` verifies about a layer's channel-means file (format 3) beyond its size and
 * SHA-256: that it is a means file (`index` int32 and `channel_mean` FixedSizeList<float32>[C], no
 * activations), that its rows run over the snapshot's stimuli in order, and that it agrees with the
 * layer file — the same indices and, bit for bit, the same channel means, row by row. It also checks
 * (`layerCodecProblem`) that every record batch of a layer file is stored the way the manifest's
 * `compression` says.
 * Reads only the index and channel-mean buffers of both files (never the activations).
 */
import { LayerBlockFile } from './block-reader.js';
import type { ManifestLayer } from './manifest.js';

/**
 * Whether every record batch of a layer file is stored as the manifest's `compression` says.
 * @returns one line for the first batch stored otherwise, or null (also for a file the reader cannot
 *   open: the layer file's own check reports that).
 */
export function layerCodecProblem(layerPath: string, entry: ManifestLayer): string | null {
  let layer: LayerBlockFile | null = null;
  try {
    layer = LayerBlockFile.open(layerPath);
    if (!layer) return null;
    const wanted = entry.compression ?? 'none';
    const words = (codec: string) => (codec === 'none' ? 'uncompressed' : `compressed with ${codec}`);
    for (let b = 0; b < layer.count; b++) {
      const codec = layer.compressionOf(b);
      if (codec !== wanted) return `stores record batch ${b} ${words(codec)}, the manifest says ${words(wanted)}`;
    }
    return null;
  } catch {
    return null;
  } finally {
    layer?.close();
  }
}

/**
 * Compares a layer file with its channel-means file.
 * @param layerPath the full layer file (already checked for size and hash).
 * @param meansPath its means file (already checked for size and hash).
 * @param entry the manifest entry.
 * @param channels C, from the manifest shape and layout.
 * @returns one line per problem (at most one agreement problem: the first difference), empty when they agree.
 */
export function meansFileProblems(layerPath: string, meansPath: string, entry: ManifestLayer, channels: number): string[] {
  const problems: string[] = [];
  let layer: LayerBlockFile | null = null;
  let means: LayerBlockFile | null = null;
  try {
    try {
      means = LayerBlockFile.open(meansPath);
    } catch (error) {
      return [`is not a readable Arrow file (${firstLine(error)})`];
    }
    if (!means || means.activationKind !== null) return ['is not a channel-means file (expected columns [index, channel_mean])'];
    if (means.widths.channels !== channels) return [`has ${means.widths.channels} channel means per row, the manifest shape [${entry.shape.join(', ')}] gives ${channels}`];
    try {
      layer = LayerBlockFile.open(layerPath);
    } catch {
      return []; // the layer file's own check reports it
    }
    if (!layer) return [];
    const mismatch = firstDifference(layer, means, channels);
    if (mismatch) problems.push(mismatch);
    return problems;
  } catch (error) {
    return [...problems, `cannot be compared with the layer file (${firstLine(error)})`];
  } finally {
    layer?.close();
    means?.close();
  }
}

/** Walks both files row by row; the first row whose index or channel means differ (as bits), or a row count that differs. */
function firstDifference(layer: LayerBlockFile, means: LayerBlockFile, channels: number): string | null {
  const rowsOf = (file: LayerBlockFile) => {
    let at = 0;
    let batch = file.count > 0 ? file.readMeansSync(0) : null;
    let r = 0;
    let row = 0;
    return {
      next(): { index: number; means: Uint32Array } | null {
        while (batch && r >= batch.rows) {
          at++;
          batch = at < file.count ? file.readMeansSync(at) : null;
          r = 0;
        }
        if (!batch) return null;
        const bits = new Uint32Array(batch.channelMeans.buffer, batch.channelMeans.byteOffset + r * channels * 4, channels);
        const out = { index: batch.index[r]!, means: bits };
        r++;
        row++;
        return out;
      },
      get row() {
        return row;
      },
    };
  };
  const a = rowsOf(layer);
  const b = rowsOf(means);
  for (;;) {
    const x = a.next();
    const y = b.next();
    if (!x && !y) return null;
    if (!x || !y) return `holds ${x ? 'fewer' : 'more'} rows than the layer file (the first ${Math.min(a.row, b.row)} agree)`;
    if (x.index !== y.index) return `row ${b.row - 1} is stimulus ${y.index}, the layer file's row is stimulus ${x.index}`;
    for (let c = 0; c < channels; c++) {
      if (x.means[c] !== y.means[c]) {
        const value = (bits: Uint32Array) => new Float32Array(bits.buffer, bits.byteOffset, bits.length)[c];
        return `does not agree with the layer file: stimulus ${x.index}, channel ${c} holds ${value(y.means)}, the layer file ${value(x.means)}`;
      }
    }
  }
}

function firstLine(error: unknown): string {
  return ((error as Error)?.message ?? String(error)).split('\n')[0] ?? '';
}
