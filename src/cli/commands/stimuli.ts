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
import { cliIo } from '../io.js';

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

/** Registers `stimuli` (with its subcommand `make`) on the program. */
export function registerStimuli(program: Command): void {
  const stimuli = program.command('stimuli').description('generate demo stimulus sets (cluttered glyph search displays)');
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

function parseFormat(text: string): StimulusFormat {
  const format = STIMULUS_FORMATS.find((f) => f === text);
  if (format === undefined) throw new UsageError('E_USAGE', `--format ${JSON.stringify(text)} is not a stimulus format`, { hint: `use ${STIMULUS_FORMATS.join(' or ')}` });
  return format;
}
