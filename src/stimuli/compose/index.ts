/**
 * `stimuli compose`: task stimuli built from the user's own labelled images, deterministically from a
 * seed. Layouts: `overlay` (two images of different categories blended, out = round(w·a + (1 − w)·b);
 * labels: both) and `grid` (k×k images tiled; labels: every category present). With a cue, exactly half
 * the composites hold the cued category and the other categories are balanced (see plan.ts).
 *
 * Writes, into a new or empty folder: `images/000000.png …` (8-bit RGB), `labels.csv` (path,label — what
 * `record --stimuli FOLDER` reads with no extra flag), `sources.csv` (which source image went into which
 * slot of which composite) and `set.json` (every option).
 */
import { mkdir, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import sharp from 'sharp';
import { RuntimeFailure, UsageError, closestHint } from '../../errors.js';
import { createRandom } from '../../random.js';
import { decodeImage } from '../decode.js';
import { imagePath, prepareFolder } from '../demo/writer.js';
import { resolvedFit, type FitMode, type Interpolation, type Preprocessing } from '../preprocess.js';
import { openStimulusSource } from '../source.js';
import { planComposites, type PlannedSlot } from './plan.js';
import { blendPixels, blockToCell, tilePixels } from './render.js';

/** How source images are combined. */
export type CompositeLayout = { kind: 'overlay'; weight: number } | { kind: 'grid'; k: number };

/** Options of `composeStimulusSet`. */
export interface ComposeOptions {
  /** Labelled images: a class-folder tree, a path,label CSV, or a folder holding one. */
  from: string;
  /** As `record --labels` for a folder: a path,label CSV, or `folders`. */
  labels?: string;
  /** Output folder, new or empty. */
  out: string;
  count: number;
  /** An integer in [0, 2³² − 1]; same seed and sources, same bytes. */
  seed: number;
  layout: CompositeLayout;
  /** A category present in exactly half the composites. */
  cued?: string | null;
  /** Height and width of a composite (default 224×224); a grid's cells are size / k. */
  size?: [number, number];
  /** How each source image is brought to its cell (default `crop`, the centre of the image). */
  fit?: FitMode;
  shorterSide?: number;
  interpolation?: Interpolation;
}

/** What `composeStimulusSet` wrote. */
export interface ComposeSummary {
  out: string;
  count: number;
  /** Composites holding each category. */
  composites: Record<string, number>;
  /** Files written, relative to `out` (`images/` for the images). */
  files: string[];
}

/**
 * Builds and writes a composed set (see the file comment).
 * @throws UsageError for bad options, a source that is not a set of singly labelled images, or an output
 *   folder that is not empty; RuntimeFailure when a file cannot be written.
 */
export async function composeStimulusSet(options: ComposeOptions): Promise<ComposeSummary> {
  const size = options.size ?? [224, 224];
  const layout = options.layout;
  checkOptions(options, size);
  const slots = layout.kind === 'overlay' ? 2 : layout.k * layout.k;
  const cell: [number, number] = layout.kind === 'overlay' ? size : [size[0] / layout.k, size[1] / layout.k];
  const prep: Preprocessing = { size: cell, mean: [0, 0, 0], std: [1, 1, 1], bgr: false, fit: options.fit ?? 'crop', ...(options.shorterSide !== undefined ? { shorterSide: options.shorterSide } : {}), interpolation: options.interpolation ?? 'lanczos3' };
  resolvedFit(prep);
  const source = openStimulusSource(options.from, { preprocessing: prep, channels: 3, ...(options.labels ? { labelsFile: options.labels } : {}) });
  if (!source.files) throw new UsageError('E_COMPOSE', `--from ${options.from} is an array; composition needs image files`, { hint: 'pass a class-folder tree or a path,label CSV' });
  const byCategory = new Map<string, number[]>();
  source.labels.forEach((labels, i) => {
    if (labels.length !== 1) {
      throw new UsageError('E_COMPOSE', `--from ${options.from}: ${source.ids[i]} has ${labels.length === 0 ? 'no category' : `${labels.length} categories (${labels.join(';')})`}; composition needs exactly one per source image`, { hint: 'give it one label, or leave it out of the listing' });
    }
    const list = byCategory.get(labels[0]!) ?? [];
    list.push(i);
    byCategory.set(labels[0]!, list);
  });
  const categories = [...byCategory.keys()].sort();
  const cued = options.cued ?? null;
  if (cued !== null && !byCategory.has(cued)) {
    const near = closestHint(cued, categories);
    throw new UsageError('E_COMPOSE', `--cued ${JSON.stringify(cued)} is not a category of ${options.from}`, { hint: `${near ? `${near}; ` : ''}categories: ${categories.join(', ')}` });
  }
  const pool = categories.filter((c) => c !== cued);
  const needed = layout.kind === 'overlay' ? 2 : 1;
  if (pool.length < needed) {
    throw new UsageError('E_COMPOSE', `--from ${options.from} has ${pool.length} ${cued ? 'categories besides the cued one' : 'categories'}; ${layout.kind === 'overlay' ? 'an overlay blends two different ones' : 'a grid needs one'}${cued ? ' in the composites without the cue' : ''}`, { hint: 'add categories to the source' });
  }
  const plan = planComposites(createRandom(options.seed).fork('compose'), { imagesPerCategory: new Map(categories.map((c) => [c, byCategory.get(c)!.length])), count: options.count, slots, cued });

  await prepareFolder(options.out);
  // decoded cells are kept for reuse up to about 256 MB, oldest dropped first (a large source would not fit)
  const cells = new Map<number, Uint8Array>();
  const maxCells = Math.max(16, Math.floor((256 * 2 ** 20) / (cell[0] * cell[1] * 3)));
  const cellOf = async (slot: PlannedSlot): Promise<{ index: number; pixels: Uint8Array }> => {
    const index = byCategory.get(slot.category)![slot.image]!;
    let pixels = cells.get(index);
    if (!pixels) {
      try {
        pixels = blockToCell(await decodeImage(source.files![index]!, prep, 3), cell[0], cell[1]);
      } catch (error) {
        throw new UsageError('E_STIMULI_DECODE', `cannot decode image ${source.ids[index]} of --from ${options.from}: ${(error as Error).message.split('\n')[0]}`);
      }
      cells.set(index, pixels);
      if (cells.size > maxCells) cells.delete(cells.keys().next().value!);
    }
    return { index, pixels };
  };
  const labelRows: string[] = [];
  const sourceRows: string[] = [];
  const composites: Record<string, number> = Object.fromEntries(categories.map((c) => [c, 0]));
  try {
    await mkdir(join(options.out, 'images'));
    for (const [n, slotsOfComposite] of plan.entries()) {
      const filled = await Promise.all(slotsOfComposite.map(cellOf));
      const pixels = layout.kind === 'overlay' ? blendPixels(filled[0]!.pixels, filled[1]!.pixels, layout.weight) : tilePixels(filled.map((f) => f.pixels), layout.k, cell[0], cell[1]);
      const file = imagePath(n);
      await writeFile(join(options.out, file), await sharp(Buffer.from(pixels.buffer, pixels.byteOffset, pixels.length), { raw: { width: size[1], height: size[0], channels: 3 } }).png().toBuffer());
      const present = [...new Set(slotsOfComposite.map((s) => s.category))].sort();
      for (const c of present) composites[c]!++;
      labelRows.push(`${csvField(file)},${csvField(present.join(';'))}`);
      filled.forEach((f, slot) => {
        const place = layout.kind === 'overlay' ? `,,${slot === 0 ? layout.weight : 1 - layout.weight}` : `${Math.floor(slot / layout.k)},${slot % layout.k},`;
        sourceRows.push(`${csvField(file)},${slot},${place},${csvField(source.ids[f.index]!)},${csvField(slotsOfComposite[slot]!.category)}`);
      });
    }
    await writeFile(join(options.out, 'labels.csv'), ['path,label', ...labelRows].join('\n') + '\n');
    await writeFile(join(options.out, 'sources.csv'), ['image,slot,row,column,weight,source,source_category', ...sourceRows].join('\n') + '\n');
    const description = { generator: 'sonde-composed', seed: options.seed, count: options.count, layout, cued, size, cell, fit: prep.fit, ...(prep.fit === 'crop' ? { shorterSide: resolvedFit(prep).shorterSide } : {}), interpolation: prep.interpolation, from: options.from, categories };
    await writeFile(join(options.out, 'set.json'), JSON.stringify(description, null, 2) + '\n');
  } catch (error) {
    if (error instanceof UsageError || error instanceof RuntimeFailure) throw error;
    throw new RuntimeFailure('E_STIMULI_WRITE', `could not write the composed set to ${options.out}: ${(error as Error).message}`, { hint: 'check that the folder is writable and the disk has space', cause: error });
  }
  return { out: options.out, count: options.count, composites, files: ['images/', 'labels.csv', 'sources.csv', 'set.json'] };
}

/**
 * One cued set per category: with a single category the set is written to `out` itself, with several each
 * goes to `out/CATEGORY/` (same seed, sources and options; the cue alone differs), so `record --stimuli
 * out/CATEGORY` reads one.
 * @throws UsageError as `composeStimulusSet`, for a repeated category, or one whose name cannot be a
 *   folder name.
 */
export async function composeCuedSets(options: Omit<ComposeOptions, 'cued'> & { cued: readonly string[] }): Promise<ComposeSummary[]> {
  const { cued, ...rest } = options;
  if (cued.length === 1) return [await composeStimulusSet({ ...rest, cued: cued[0]! })];
  if (new Set(cued).size !== cued.length) throw new UsageError('E_COMPOSE', `--cued ${cued.join(',')} names a category twice`);
  for (const category of cued) {
    if (category === '' || category === '.' || category === '..' || /[\\/\0]/.test(category)) {
      throw new UsageError('E_COMPOSE', `--cued category ${JSON.stringify(category)} cannot name a folder`, { hint: 'compose that category in a run of its own with --cued and its own --out' });
    }
  }
  await prepareFolder(options.out);
  const summaries: ComposeSummary[] = [];
  for (const category of cued) summaries.push(await composeStimulusSet({ ...rest, cued: category, out: join(options.out, category) }));
  return summaries;
}

function checkOptions(options: ComposeOptions, size: [number, number]): void {
  if (!Number.isSafeInteger(options.count) || options.count <= 0) throw new UsageError('E_COMPOSE', `--count ${options.count} must be a positive integer`);
  if (!Number.isSafeInteger(options.seed) || options.seed < 0 || options.seed > 0xffffffff) throw new UsageError('E_COMPOSE', `--seed ${options.seed} must be an integer in [0, 4294967295]`);
  if (options.cued && options.count % 2 !== 0) throw new UsageError('E_COMPOSE', `--count ${options.count} must be even with --cued (exactly half the composites hold the cue)`, { hint: `e.g. --count ${options.count + 1}` });
  const layout = options.layout;
  if (layout.kind === 'overlay' && !(layout.weight > 0 && layout.weight < 1)) throw new UsageError('E_COMPOSE', `--weight ${layout.weight} must lie strictly between 0 and 1 (both images must show)`);
  if (layout.kind === 'grid') {
    if (!Number.isSafeInteger(layout.k) || layout.k < 2 || layout.k > 16) throw new UsageError('E_COMPOSE', `grid:${layout.k} must have k between 2 and 16`);
    if (size[0] % layout.k !== 0 || size[1] % layout.k !== 0) throw new UsageError('E_COMPOSE', `--size ${size.join('x')} does not split into ${layout.k}x${layout.k} equal cells`, { hint: `use a multiple of ${layout.k}, e.g. ${layout.k * Math.max(1, Math.round(size[0] / layout.k))}x${layout.k * Math.max(1, Math.round(size[1] / layout.k))}` });
  }
}

/** A CSV field, quoted when it holds a comma, quote or line break (RFC 4180). */
function csvField(text: string): string {
  return /[",\r\n]/.test(text) ? `"${text.replace(/"/g, '""')}"` : text;
}
