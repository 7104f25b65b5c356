import { existsSync, readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { describe, expect, it } from 'vitest';
import { runSonde, tempFolder } from '../../helpers/onnx-builder.js';

const GLYPHS = resolve(__dirname, '..', '..', '..', 'examples', 'glyphs');

describe('sonde stimuli compose', () => {
  it('sonde stimuli compose --layout grid:2 --cued disc writes the set and counts composites per category', async () => {
    const out = join(tempFolder('sonde-compose-cli-'), 'set');
    const result = await runSonde(['stimuli', 'compose', '--from', GLYPHS, '--out', out, '--count', '6', '--seed', '3', '--layout', 'grid:2', '--cued', 'disc', '--size', '32x32']);
    expect(result.code, result.stderr).toBe(0);
    expect(result.stdout).toMatch(/wrote 6 composites to .*images\/, labels\.csv, sources\.csv, set\.json/);
    expect(result.stdout).toMatch(/disc 3/);
    const set = JSON.parse(readFileSync(join(out, 'set.json'), 'utf8')) as { layout: unknown; cued: string; cell: number[] };
    expect(set).toMatchObject({ layout: { kind: 'grid', k: 2 }, cued: 'disc', cell: [16, 16] });
  });

  it('sonde stimuli compose --cued ring,disc writes one cued set per category, each read with its own labels', async () => {
    const out = join(tempFolder('sonde-compose-cli-'), 'sets');
    const result = await runSonde(['stimuli', 'compose', '--from', GLYPHS, '--out', out, '--count', '8', '--seed', '5', '--cued', 'ring,disc', '--size', '32x32']);
    expect(result.code, result.stderr).toBe(0);
    for (const category of ['ring', 'disc']) {
      const rows = readFileSync(join(out, category, 'labels.csv'), 'utf8').trim().split('\n').slice(1);
      expect(rows).toHaveLength(8);
      expect(rows.filter((row) => row.split(',')[1]!.split(';').includes(category))).toHaveLength(4);
    }
  });

  it('sonde stimuli compose refuses a bad layout, a bad weight, an unknown cue and an --out inside --from in one line (exit 2)', async () => {
    const dir = tempFolder('sonde-compose-cli-');
    for (const [args, pattern] of [
      [['--layout', 'mosaic'], /--layout "mosaic" is not a layout/],
      [['--weight', '1.5'], /--weight 1\.5 must lie strictly between 0 and 1/],
      [['--cued', 'rnig'], /--cued "rnig" is not a category .*closest: "ring"/],
      [['--out', join(GLYPHS, 'ring', 'inside')], /--out .* lies inside --from/],
    ] as const) {
      const result = await runSonde(['stimuli', 'compose', '--from', GLYPHS, '--out', join(dir, 'x'), '--count', '4', '--seed', '1', ...args]);
      expect(existsSync(join(GLYPHS, 'ring', 'inside'))).toBe(false);
      expect(result.code, result.stderr).toBe(2);
      expect(result.stderr.trim().split('\n')).toHaveLength(1);
      expect(result.stderr).toMatch(pattern);
    }
  });
});
