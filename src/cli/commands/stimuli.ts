/**
 * `sonde stimuli make`: writes a demo set of cluttered glyph search displays (see src/stimuli/demo/).
 * The handler only turns option strings into DemoDisplayOptions and calls makeStimulusSet.
 */
import type { Command } from 'commander';
import { UsageError, closestHint } from '../../errors.js';
import {
  DEFAULT_DISPLAY_OPTIONS,
  DEMO_KINDS,
  STIMULUS_FORMATS,
  isDemoKind,
  makeStimulusSet,
  type DemoKind,
  type StimulusFormat,
} from '../../stimuli/demo/index.js';
import { composeCuedSets, composeStimulusSet, type CompositeLayout } from '../../stimuli/compose/index.js';
import { parseFit, parseInterpolation, parseSize } from '../../stimuli/preprocess.js';
import { assertApartFromInputs } from '../../outputs/output-folder.js';
import { cliIo } from '../io.js';

interface ComposeFlags {
  from: string;
  labels?: string;
  out: string;
  count: string;
  seed: string;
  layout: string;
  weight: string;
  cued?: string;
  size: string;
  fit: string;
  interpolation: string;
}

interface MakeFlags {
  out: string;
  count: string;
  seed: string;
  kinds?: string;
  clutter?: string;
  noise?: string;
  cued?: string;
  format: string;
}

/** Registers `stimuli` (with its subcommands `make` and `compose`) on the program. */
export function registerStimuli(program: Command): void {
  const stimuli = program.command('stimuli').description('make stimulus sets: demo glyph displays, or task stimuli composed from your labelled images');
  stimuli
    .command('compose')
    .description('compose overlays or grids from labelled images (class folders or a path,label CSV), with labels and a listing of the sources')
    .requiredOption('--from <source>', 'labelled images: class-folder tree, path,label CSV, or a folder holding one')
    .requiredOption('--out <dir>', 'output folder (new or empty)')
    .requiredOption('--count <n>', 'number of composites')
    .requiredOption('--seed <s>', 'seed, an integer in [0, 4294967295]; same seed and sources, same bytes')
    .option('--layout <layout>', 'overlay (two images of different categories blended) or grid:K (K×K images tiled)', 'overlay')
    .option('--weight <w>', 'overlay: weight of the first image, in (0, 1); the second gets 1 − w', '0.5')
    .option('--cued <categories>', 'exactly half the composites hold this category, the other categories balanced; several (a,b) write one set per category into OUT/CATEGORY/')
    .option('--size <HxW>', 'size of a composite (a grid cell is size / K)', '224x224')
    .option('--fit <mode>', 'how a source image fills its cell: crop[:S], squash or letterbox', 'crop')
    .option('--interpolation <kernel>', 'resizing kernel: nearest, bilinear, bicubic or lanczos3', 'lanczos3')
    .option('--labels <csv>', 'for a folder: a path,label CSV to read it through, or folders to label by subfolder')
    .action(async (flags: ComposeFlags) => {
      // the set may not be written into (or over) the images it is composed from
      assertApartFromInputs(flags.out, '--out', [{ option: '--from', path: flags.from }, { option: '--labels', path: flags.labels }]);
      const common = {
        from: flags.from,
        ...(flags.labels !== undefined ? { labels: flags.labels } : {}),
        out: flags.out,
        count: parseInteger('--count', flags.count),
        seed: parseInteger('--seed', flags.seed),
        layout: parseLayout(flags.layout, flags.weight),
        cued: flags.cued ?? null,
        size: parseSize(flags.size),
        ...parseFit(flags.fit),
        interpolation: parseInterpolation(flags.interpolation),
      };
      const cued = flags.cued === undefined ? [] : flags.cued.split(',').map((c) => c.trim());
      const summaries = cued.length === 0 ? [await composeStimulusSet({ ...common, cued: null })] : await composeCuedSets({ ...common, cued });
      for (const summary of summaries) {
        const counts = Object.entries(summary.composites).map(([category, n]) => `${category} ${n}`).join(', ');
        cliIo().stdout(`wrote ${summary.count} composites to ${summary.out}: ${summary.files.join(', ')}\ncomposites per category: ${counts}\n`);
      }
    });
  stimuli
    .command('make')
    .description('write a seeded set of 64×64 search displays with their labels')
    .requiredOption('--out <dir>', 'output folder (new or empty)')
    .requiredOption('--count <n>', 'number of displays')
    .requiredOption('--seed <s>', 'seed, an integer in [0, 4294967295]; same seed, same bytes')
    .option('--kinds <list>', `comma-separated glyph kinds to draw (default: all of ${DEMO_KINDS.join(',')})`)
    .option('--clutter <level>', `clutter level in [0, 1] (default ${DEFAULT_DISPLAY_OPTIONS.clutter})`)
    .option('--noise <sd>', `pixel noise standard deviation in [0, 1] (default ${DEFAULT_DISPLAY_OPTIONS.noise})`)
    .option('--cued <kind>', 'make a cued-detection set: exactly half the displays contain this kind')
    .option('--format <format>', `png (images/ + labels.csv) or npy (stimuli.npy + labels.csv)`, 'png')
    .action(async (flags: MakeFlags) => {
      const summary = await makeStimulusSet({
        out: flags.out,
        count: parseInteger('--count', flags.count),
        seed: parseInteger('--seed', flags.seed),
        kinds: flags.kinds === undefined ? undefined : parseKinds(flags.kinds),
        clutter: flags.clutter === undefined ? undefined : parseNumber('--clutter', flags.clutter),
        noise: flags.noise === undefined ? undefined : parseNumber('--noise', flags.noise),
        cued: flags.cued === undefined ? undefined : parseKind('--cued', flags.cued),
        format: parseFormat(flags.format),
      });
      const d = summary.description;
      const present = d.kinds.map((kind) => `${kind} ${summary.kindCounts[kind]}`).join(', ');
      cliIo().stdout(
        `wrote ${d.count} displays (${d.format}${d.cued === null ? '' : `, cued ${d.cued}`}) to ${summary.out}: ${summary.files.join(', ')}\n` +
          `displays per kind: ${present}\n`,
      );
    });
}

function parseInteger(flag: string, text: string): number {
  const value = Number(text);
  if (text.trim() === '' || !Number.isInteger(value)) {
    throw new UsageError('E_USAGE', `${flag} ${JSON.stringify(text)} is not an integer`, { hint: `pass a whole number, e.g. ${flag} 100` });
  }
  return value;
}

function parseNumber(flag: string, text: string): number {
  const value = Number(text);
  if (text.trim() === '' || !Number.isFinite(value)) {
    throw new UsageError('E_USAGE', `${flag} ${JSON.stringify(text)} is not a number`, { hint: `pass a number, e.g. ${flag} 0.5` });
  }
  return value;
}

function parseKind(flag: string, text: string): DemoKind {
  const name = text.trim();
  if (!isDemoKind(name)) {
    const near = closestHint(name, DEMO_KINDS);
    throw new UsageError('E_USAGE', `${flag} ${JSON.stringify(text)} is not a glyph kind`, { hint: `${near ? `${near}; ` : ''}kinds are ${DEMO_KINDS.join(', ')}` });
  }
  return name;
}

function parseKinds(text: string): DemoKind[] {
  return text.split(',').map((part) => parseKind('--kinds', part));
}

function parseLayout(text: string, weight: string): CompositeLayout {
  const grid = /^grid:(\d+)$/.exec(text.trim());
  if (grid) return { kind: 'grid', k: Number(grid[1]) };
  if (text.trim() === 'overlay') return { kind: 'overlay', weight: parseNumber('--weight', weight) };
  throw new UsageError('E_USAGE', `--layout ${JSON.stringify(text)} is not a layout`, { hint: 'use overlay or grid:K, e.g. grid:2' });
}

function parseFormat(text: string): StimulusFormat {
  const format = STIMULUS_FORMATS.find((f) => f === text);
  if (format === undefined) throw new UsageError('E_USAGE', `--format ${JSON.stringify(text)} is not a stimulus format`, { hint: `use ${STIMULUS_FORMATS.join(' or ')}` });
  return format;
}
