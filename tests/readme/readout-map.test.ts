/**
 * README "The network's own units as categories (readout maps)": every command of its ```sh block runs
 * verbatim, in order, in a fresh folder (tests/helpers/readme.ts), on the committed stand-in network; the
 * outputs are what the section says — tables under the map with its categories and tag, the inline form
 * of the file's map accepted as the same map, and detection scored by the log-sum-exp of each category's
 * units (checked against a direct float64 computation from the recorded logits and pair-counted ROC areas).
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { readSensitivityTable, readTuningTable, READOUT_MAP_KEY } from '../../src/snapshot/tables.js';
import { pairAuc } from '../helpers/pair-auc.js';
import { readmeCommands, readmeWorkFolder, runReadmeCommand } from '../helpers/readme.js';

const HEADING = 'The network\'s own units as categories (readout maps)';
const KINDS = ['ring', 'bar', 'disc', 'cross'];
const UNITS: Record<string, number[]> = { ring: [0, 1, 2], bar: [3, 4], disc: [5], cross: [6, 7, 8] };

describe('README "The network\'s own units as categories (readout maps)"', () => {
  it('readmeCommands(readout maps) run verbatim: tune, sense, sweep, size-matched and diff under one map, detection from the log-sum-exp of the mapped units', async () => {
    const commands = readmeCommands('README.md', HEADING);
    expect(commands.length).toBe(12);
    const folder = readmeWorkFolder();
    const outputs: string[] = [];
    for (const command of commands) outputs.push((await runReadmeCommand(command, folder)).stdout);

    const tuning = readTuningTable(join(folder, 'mapped', 'tuning.arrow'));
    const sens = readSensitivityTable(join(folder, 'mapped', 'sens.arrow'));
    expect(tuning.categories).toEqual(KINDS);
    expect(sens.categories).toEqual(KINDS);
    expect(JSON.parse(tuning.metadata[READOUT_MAP_KEY]!).name).toBe('units.json');
    expect(sens.metadata[READOUT_MAP_KEY]).toBe(tuning.metadata[READOUT_MAP_KEY]);

    const held = openSnapshot(join(folder, 'snapshots', 'mapped-held'));
    const n = held.manifest.stimuli.count;
    const logits = await held.readChannelMeans('logits');
    const width = held.layerGeometry('logits').channels;
    expect(width).toBe(10);
    const auc: Record<string, number> = {};
    for (const kind of KINDS) {
      const scores = Array.from({ length: n }, (_, i) => {
        const y = UNITS[kind]!.map((u) => logits[i * width + u]!);
        const m = Math.max(...y);
        return m + Math.log(y.reduce((s, v) => s + Math.exp(v - m), 0));
      });
      auc[kind] = pairAuc(scores, held.stimuli.labels.map((l) => (l.includes(kind) ? 1 : 0)));
    }
    const sweep = JSON.parse(readFileSync(join(folder, 'mapped', 'sweep', 'sweep.json'), 'utf8')) as { categories: string[]; cells: Array<{ category: string; base: { auc: number } }> };
    expect([...sweep.categories].sort()).toEqual([...KINDS].sort());
    for (const cell of sweep.cells) expect(cell.base.auc).toBeCloseTo(auc[cell.category]!, 12);
    const comparison = JSON.parse(readFileSync(join(folder, 'mapped', 'comparison.json'), 'utf8')) as { readoutMap: { name: string }; categories: string[]; baseAuc: number; effects: Array<{ scheme: string }> };
    expect(comparison.readoutMap.name).toBe('units.json');
    expect(comparison.baseAuc).toBeCloseTo(comparison.categories.reduce((s, k) => s + auc[k]!, 0) / comparison.categories.length, 12);
    expect(comparison.effects.some((e) => e.scheme === 'sensitivity')).toBe(true);
    const diff = outputs[outputs.length - 1]!;
    expect(diff).toMatch(/task: detection from "logits" grouped by readout map units\.json/);
    expect(diff).toContain(`ring     │ 0.`);
    expect(diff).toMatch(new RegExp(`AUC\\s.*\\n[\\s\\S]*${auc['ring']!.toFixed(3)} →`));
  }, 600_000);
});
