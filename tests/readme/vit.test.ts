/**
 * README "Transformers (ViT)": every command of its ```sh block runs, in order, in a fresh folder
 * (tests/helpers/readme.ts), on the small seeded torchvision VisionTransformer of the PyTorch fixtures
 * (tests/reference/fixtures/attention/vit-opset14.onnx: 32 px, 2 blocks, 2 heads, width 16) standing in
 * for the ViT-B/16 the section measures, which takes PyTorch to export (its ```bash block) and 346 MB.
 * One substitution: the section's sites in block 5 (of ViT-B/16's 12) are taken in block 1 (of 2); the
 * tensor names are otherwise the same in both exports.
 */
import { copyFileSync, existsSync, mkdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { readmeCommands, readmeWorkFolder, runReadmeCommand, shellBlocks } from '../helpers/readme.js';
import { ROOT } from '../robustness/cli-process.js';

const HEADING = 'Transformers (ViT)';
const SMALL_VIT = join(ROOT, 'tests', 'reference', 'fixtures', 'attention', 'vit-opset14.onnx');

describe('README "Transformers (ViT)"', () => {
  it('shellBlocks(bash) of the section exports the model with the repository\'s torchvision script into the folder the commands read', () => {
    const [exportBlock] = shellBlocks(readFileSync(join(ROOT, 'README.md'), 'utf8'), HEADING, 'bash');
    expect(exportBlock).toMatch(/tools\/torchvision\/export_seeded\.py vit-model vit_b_16/);
    expect(existsSync(join(ROOT, 'tools', 'torchvision', 'export_seeded.py'))).toBe(true);
  });

  it('readmeCommands(ViT) run on a small seeded ViT: record, tune, sense, modulated records (tuning gain, head lesion, class token) with tail replay, sweep, diff, report', async () => {
    const commands = readmeCommands('README.md', HEADING).map((c) => c.replaceAll('encoder_layer_5', 'encoder_layer_1'));
    const folder = readmeWorkFolder();
    mkdirSync(join(folder, 'vit-model'));
    copyFileSync(SMALL_VIT, join(folder, 'vit-model', 'vit_b_16.onnx'));
    const outputs: string[] = [];
    for (const command of commands) {
      const { stdout, stderr } = await runReadmeCommand(command, folder);
      outputs.push(stdout + stderr);
    }
    for (const name of ['vit-ring', 'vit-heads', 'vit-class']) {
      const manifest = JSON.parse(readFileSync(join(folder, 'snapshots', name, 'manifest.json'), 'utf8')) as { run: { mode: string } };
      expect(manifest.run.mode, name).toBe('tail');
    }
    const heads = JSON.parse(readFileSync(join(folder, 'snapshots', 'vit-heads', 'manifest.json'), 'utf8')) as { modulation: { modulations: Array<{ details: Record<string, unknown> }> } };
    expect(heads.modulation.modulations[0]!.details).toMatchObject({ per: 'head', heads: [0, 1] });
    expect(outputs.join('\n')).toMatch(/16 features/); // sense says what its values are of
    const sweep = JSON.parse(readFileSync(join(folder, 'vit', 'sweep', 'sweep.json'), 'utf8')) as { categories: string[] };
    expect(sweep.categories).toEqual(['ring', 'bar', 'disc', 'cross']);
    expect(existsSync(join(folder, 'vit', 'report.html'))).toBe(true);
  }, 600_000);
});
