/**
 * README "Your own network, end to end": every command of its ```sh block runs verbatim, in order, in a
 * fresh folder (tests/helpers/readme.ts), on the committed stand-in network; the outputs are what the
 * section says. The PyTorch export snippet cannot run without Python: it is checked to be, line for line,
 * the export call of examples/own-network/make_net.py, which made the committed net.onnx.
 */
import { existsSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { readmeCommands, readmeWorkFolder, runReadmeCommand, shellBlocks } from '../helpers/readme.js';
import { ROOT } from '../robustness/cli-process.js';

const HEADING = 'Your own network, end to end';

describe('README "Your own network, end to end"', () => {
  it('shellBlocks(python) of the section is the export call of examples/own-network/make_net.py, verbatim', () => {
    const [snippet] = shellBlocks(readFileSync(join(ROOT, 'README.md'), 'utf8'), HEADING, 'python');
    const script = readFileSync(join(ROOT, 'examples', 'own-network', 'make_net.py'), 'utf8');
    const between = /# --- the README's export snippet ---\n([\s\S]*?)# --- end of the snippet ---/.exec(script)![1]!;
    expect(snippet!.trim()).toBe(between.trim());
    expect(snippet).toMatch(/dynamic_axes=\{'image': \{0: 'batch'\}/);
  });

  it('readmeCommands(own network) run verbatim: heads fitted and used as the readout by tune, sense, sweep, size-matched, diff and report', async () => {
    const commands = readmeCommands('README.md', HEADING);
    expect(commands.length).toBe(15);
    const folder = readmeWorkFolder();
    const outputs: string[] = [];
    for (const command of commands) outputs.push((await runReadmeCommand(command, folder)).stdout);

    const sidecar = JSON.parse(readFileSync(join(folder, 'own', 'net-heads.json'), 'utf8')) as { outputs: { name: string; kinds: string[] }; heads: { layer: string; heads: Array<{ category: string; heldOut: { auc: number } }> } };
    expect(sidecar.outputs.name).toBe('readout_heads');
    expect(sidecar.outputs.kinds).toEqual(['bar', 'cross', 'disc', 'ring']);
    expect(sidecar.heads.layer).toBe('/block3/block3.1/Relu_output_0');
    const manifest = JSON.parse(readFileSync(join(folder, 'snapshots', 'own-held-heads', 'manifest.json'), 'utf8')) as { readout: { name: string } };
    expect(manifest.readout.name).toBe('readout_heads');
    // the sensitivity table has the heads' categories, so it pairs with the tuning table
    expect(outputs[8]).toMatch(/gain sensitivities of readout_heads \(4 units\)/);
    const sweep = JSON.parse(readFileSync(join(folder, 'own', 'sweep', 'sweep.json'), 'utf8')) as { categories: string[]; summary: string };
    expect(sweep.categories).toEqual(['bar', 'cross', 'disc', 'ring']);
    expect(sweep.summary).toMatch(/not size-matched/);
    const comparison = JSON.parse(readFileSync(join(folder, 'own', 'comparison.json'), 'utf8')) as { kind: string; heldOut: boolean; effects: Array<{ scheme: string; size: number }> };
    expect(comparison.kind).toBe('size-matched');
    expect(comparison.heldOut).toBe(true);
    for (const e of comparison.effects.filter((x) => x.scheme === 'tuning' || x.scheme === 'sensitivity')) expect(e.size).toBeCloseTo(0.1, 5);
    const diff = JSON.parse(readFileSync(join(folder, 'own', 'diff-ring.json'), 'utf8')) as { task: { readout: string; categories: Array<{ category: string }> } };
    expect(diff.task.readout).toBe('readout_heads');
    expect(diff.task.categories[0]!.category).toBe('ring');
    expect(existsSync(join(folder, 'own', 'report.html'))).toBe(true);
  }, 600_000);
});
