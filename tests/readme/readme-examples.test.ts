/**
 * The README's examples work as written: every command of the ```sh blocks under "Using it" runs, in
 * order, in a fresh folder on the demo network and displays made by `sonde stimuli make` (the helper in
 * tests/helpers/readme.ts extracts and runs them; other sections can reuse it). A command that fails
 * fails the test with its output. Checks beyond "it runs" follow from the README's own words.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { readmeCommands, readmeWorkFolder, runReadmeCommand, shellBlocks } from '../helpers/readme.js';
import { ROOT } from '../robustness/cli-process.js';

/** Commands that cannot run on a machine without a job scheduler; each is named with the reason. */
const NEEDS_SLURM = /^\.\/bin\/sonde cluster /;

describe('README "Using it"', () => {
  it('readmeCommands("Using it") run in order on the demo network, and each output lands where the README says', async () => {
    const commands = readmeCommands('README.md', 'Using it');
    expect(commands.length).toBeGreaterThan(10);
    const folder = readmeWorkFolder();
    const outputs = new Map<string, string>();
    for (const command of commands) {
      if (NEEDS_SLURM.test(command)) continue; // needs sbatch/squeue (docs/cluster.md has its own tests)
      const { stdout } = await runReadmeCommand(command, folder);
      outputs.set(command, stdout);
    }
    // --out NAME without a slash: folders of results under snapshots/, files where given
    for (const path of ['snapshots/fit/manifest.json', 'snapshots/base/manifest.json', 'snapshots/attend/manifest.json', 'snapshots/sweep1/sweep.json', 'tuning.arrow', 'sens.arrow', 'comparison.json', 'report.html', 'diff.json']) {
      expect(existsSync(join(folder, path)), path).toBe(true);
    }
    // the library snippet's layer names are real: the demo network records /conv7/relu/Relu_output_0
    const manifest = JSON.parse(readFileSync(join(folder, 'snapshots/base/manifest.json'), 'utf8')) as { layers: Array<{ name: string }> };
    expect(manifest.layers.map((l) => l.name)).toContain('/conv7/relu/Relu_output_0');
    // the examples' uniform spec is the gain itself (README: `gain: G` multiplies every channel by G)
    const uniform = JSON.parse(readFileSync(join(folder, 'snapshots/uniform/manifest.json'), 'utf8')) as { modulation: { modulations: Array<{ gain: number[] }> } };
    expect(new Set(uniform.modulation.modulations[0]!.gain)).toEqual(new Set([Math.fround(1.2)]));
    // the library snippet (plain JavaScript apart from its file type) runs as an ES module in the same folder
    const [snippet] = shellBlocks(readFileSync(join(ROOT, 'README.md'), 'utf8'), 'Reading snapshots elsewhere', 'ts').filter((b) => b.includes("from 'sonde'"));
    expect(snippet, 'a ```ts block importing sonde').toBeDefined();
    writeFileSync(join(folder, 'library.mjs'), snippet!);
    const { stdout } = await runReadmeCommand('node library.mjs', folder);
    expect(stdout).toMatch(/^the change /);
  }, 600_000);
});
