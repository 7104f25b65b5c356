/**
 * Writes a demo stimulus set to a folder, in one of two layouts the recorder reads:
 *
 * - `png`: `images/000000.png …` (8-bit RGB) and `labels.csv` with header `path,label`, the path
 *   relative to the CSV, the label the kinds present joined with `;`.
 * - `npy`: `stimuli.npy`, float32 [N, 3, 64, 64] in [0, 1], and `labels.csv` with a single `label` column
 *   in row order (`""` for a display without labels).
 *
 * Both write `set.json`, the description of the set (every option, the generator version). The same
 * options give byte-identical files.
 */
import { mkdir, open, readdir, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import sharp from 'sharp';
import { RuntimeFailure, UsageError } from '../../errors.js';
import { createDisplaySet } from './display.js';
import { DEMO_KINDS, type DemoKind } from './glyphs.js';
import { DISPLAY_SIZE, GENERATOR_VERSION, type DemoDisplayOptions } from './options.js';

/** File layout of a written set. */
export type StimulusFormat = 'png' | 'npy';

/** The file layouts, for option checking. */
export const STIMULUS_FORMATS: readonly StimulusFormat[] = ['png', 'npy'];

/** Options of makeStimulusSet: the display options plus where and how to write. */
export interface StimulusSetOptions extends DemoDisplayOptions {
  /** Output folder; created if missing, must be empty if it exists. */
  out: string;
  /** Displays to write (required here, unlike in DemoDisplayOptions). */
  count: number;
  /** File layout. Default 'png'. */
  format?: StimulusFormat;
}

/** The content of `set.json`. */
export interface StimulusSetDescription {
  generator: 'sonde-glyph-displays';
  generatorVersion: number;
  seed: number;
  count: number;
  kinds: DemoKind[];
  clutter: number;
  noise: number;
  contrast: number;
  glyphRadius: [number, number];
  maxGlyphs: number;
  cued: DemoKind | null;
  format: StimulusFormat;
  /** [channels, height, width] of one display. */
  shape: [number, number, number];
}

/** What makeStimulusSet wrote. */
export interface StimulusSetSummary {
  /** The output folder, as given. */
  out: string;
  /** Files written, relative to `out` (image files of the png layout are summarised as `images/`). */
  files: string[];
  /** Displays containing each kind (every DEMO_KINDS key present, 0 for kinds not drawn). */
  kindCounts: Record<DemoKind, number>;
  description: StimulusSetDescription;
}

/**
 * Renders the set described by `options` and writes it under `options.out`.
 * @throws UsageError for invalid options, an unknown format, or an output folder that exists and is not
 *   empty (so stale files of an earlier, larger set can never mix in).
 * @throws RuntimeFailure when a file cannot be written.
 */
export async function makeStimulusSet(options: StimulusSetOptions): Promise<StimulusSetSummary> {
  const format = options.format ?? 'png';
  if (!STIMULUS_FORMATS.includes(format)) {
    throw new UsageError('E_STIMULI_OPTION', `stimulus option format = ${JSON.stringify(format)} is not valid`, { hint: `use ${STIMULUS_FORMATS.join(' or ')}` });
  }
  const set = createDisplaySet(options);
  const resolved = set.options;
  await prepareFolder(options.out);
  const kindCounts = Object.fromEntries(DEMO_KINDS.map((kind) => [kind, 0])) as Record<DemoKind, number>;
  const labels: string[] = [];
  const files: string[] = [];
  try {
    if (format === 'png') {
      await mkdir(join(options.out, 'images'));
      for (let i = 0; i < resolved.count; i++) {
        const display = set.render(i);
        await writeFile(join(options.out, imagePath(i)), await encodePng(display.pixels));
        labels.push(display.labels.join(';'));
        for (const kind of display.labels) kindCounts[kind]++;
      }
      files.push('images/');
      await writeFile(join(options.out, 'labels.csv'), ['path,label', ...labels.map((label, i) => `${imagePath(i)},${label}`)].join('\n') + '\n');
    } else {
      const shape = [resolved.count, 3, DISPLAY_SIZE, DISPLAY_SIZE];
      const handle = await open(join(options.out, 'stimuli.npy'), 'w');
      try {
        await handle.write(npyFloat32Header(shape));
        for (let i = 0; i < resolved.count; i++) {
          const display = set.render(i);
          await handle.write(new Uint8Array(display.pixels.buffer, display.pixels.byteOffset, display.pixels.byteLength));
          labels.push(display.labels.join(';'));
          for (const kind of display.labels) kindCounts[kind]++;
        }
      } finally {
        await handle.close();
      }
      files.push('stimuli.npy');
      // a display without labels is written "" (a blank line would be skipped by CSV readers)
      await writeFile(join(options.out, 'labels.csv'), ['label', ...labels.map((label) => (label === '' ? '""' : label))].join('\n') + '\n');
    }
    files.push('labels.csv');
    const description: StimulusSetDescription = {
      generator: 'sonde-glyph-displays',
      generatorVersion: GENERATOR_VERSION,
      seed: resolved.seed,
      count: resolved.count,
      kinds: [...resolved.kinds],
      clutter: resolved.clutter,
      noise: resolved.noise,
      contrast: resolved.contrast,
      glyphRadius: [resolved.glyphRadius[0], resolved.glyphRadius[1]],
      maxGlyphs: resolved.maxGlyphs,
      cued: resolved.cued,
      format,
      shape: [3, DISPLAY_SIZE, DISPLAY_SIZE],
    };
    await writeFile(join(options.out, 'set.json'), JSON.stringify(description, null, 2) + '\n');
    files.push('set.json');
    return { out: options.out, files, kindCounts, description };
  } catch (error) {
    if (error instanceof UsageError || error instanceof RuntimeFailure) throw error;
    throw new RuntimeFailure('E_STIMULI_WRITE', `could not write the stimulus set to ${options.out}: ${error instanceof Error ? error.message : String(error)}`, {
      hint: 'check that the folder is writable and the disk has space',
      cause: error,
    });
  }
}

/** Relative path of image `index` in the png layout: `images/000042.png`. */
export function imagePath(index: number): string {
  return `images/${String(index).padStart(6, '0')}.png`;
}

/**
 * Encodes a CHW [3, 64, 64] display with values k/255 as an 8-bit RGB PNG (zlib level 9, no adaptive
 * filtering, so equal pixels give equal bytes). Values are rounded to the nearest 1/255 and clamped.
 */
export async function encodePng(pixels: Float32Array, width = DISPLAY_SIZE, height = DISPLAY_SIZE): Promise<Buffer> {
  const plane = width * height;
  const raw = Buffer.alloc(3 * plane);
  for (let i = 0; i < plane; i++) {
    // CHW → HWC: channel c of pixel i is pixels[c*plane + i], goes to raw[3*i + c]
    for (let c = 0; c < 3; c++) {
      const value = Math.round(pixels[c * plane + i]! * 255);
      raw[3 * i + c] = value < 0 ? 0 : value > 255 ? 255 : value;
    }
  }
  return sharp(raw, { raw: { width, height, channels: 3 } }).png({ compressionLevel: 9, adaptiveFiltering: false }).toBuffer();
}

/**
 * The `.npy` version 1.0 header for a C-order float32 array of `shape`, byte for byte what formatNpy
 * (../npy.ts) writes before the data; lets a large set be streamed to disk without holding it in memory.
 */
export function npyFloat32Header(shape: readonly number[]): Uint8Array {
  const shapeText = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
  let header = `{'descr': '<f4', 'fortran_order': False, 'shape': ${shapeText}, }`;
  const unpadded = 10 + header.length + 1; // magic (6) + version (2) + length (2) + header + newline
  header += ' '.repeat((64 - (unpadded % 64)) % 64) + '\n';
  const out = new Uint8Array(10 + header.length);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0], 0);
  new DataView(out.buffer).setUint16(8, header.length, true);
  for (let i = 0; i < header.length; i++) out[10 + i] = header.charCodeAt(i);
  return out;
}

/** Creates `out`, or accepts it when it exists and is empty. @throws UsageError when it holds anything. */
export async function prepareFolder(out: string): Promise<void> {
  let entries: string[] | null = null;
  try {
    entries = await readdir(out);
  } catch (error) {
    if ((error as NodeJS.ErrnoException).code !== 'ENOENT') {
      throw new RuntimeFailure('E_STIMULI_WRITE', `cannot read the output folder ${out}: ${(error as Error).message}`, { hint: 'pass a folder you can write to' });
    }
  }
  if (entries !== null && entries.length > 0) {
    throw new UsageError('E_STIMULI_OUT', `output folder ${out} is not empty (${entries.length} entries)`, { hint: 'choose a new or empty folder for --out' });
  }
  try {
    await mkdir(out, { recursive: true });
  } catch (error) {
    throw new RuntimeFailure('E_STIMULI_WRITE', `cannot create the output folder ${out}: ${(error as Error).message}`, { hint: 'pass a folder you can write to' });
  }
}
