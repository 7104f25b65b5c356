/**
 * README "Your own images": every command of its ```sh block runs verbatim, in order, in a fresh folder
 * (tests/helpers/readme.ts), and the outputs say what the section says: composites read through their
 * labels.csv with no extra flag, the cue in exactly half, the crop recorded in the manifest, and the demo
 * generator's folder read with its labels.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { readmeCommands, readmeWorkFolder, runReadmeCommand } from '../helpers/readme.js';

interface Manifest {
  stimuli: { source: string; count: number; categories: string[] };
  preprocessing: { fit: string; interpolation: string; shorterSide?: number; normalise: string };
}

const manifest = (folder: string, name: string): Manifest => JSON.parse(readFileSync(join(folder, 'snapshots', name, 'manifest.json'), 'utf8')) as Manifest;

describe('README "Your own images"', () => {
  it('readmeCommands("Your own images") run verbatim and record composites, class folders and demo displays with their labels', async () => {
    const commands = readmeCommands('README.md', 'Your own images');
    expect(commands.length).toBe(7);
    const folder = readmeWorkFolder();
    for (const command of commands) await runReadmeCommand(command, folder);

    const overlays = manifest(folder, 'overlays-base');
    expect(overlays.stimuli.count).toBe(20);
    expect(overlays.stimuli.categories).toEqual(['cross', 'disc', 'ring']);
    expect(overlays.stimuli.source).toMatch(/labels\.csv/);
    const labels = readFileSync(join(folder, 'overlays', 'labels.csv'), 'utf8').trim().split('\n').slice(1);
    expect(labels.filter((row) => row.split(',')[1]!.split(';').includes('ring'))).toHaveLength(10);
    expect(labels.every((row) => row.split(',')[1]!.split(';').length === 2)).toBe(true);

    expect(manifest(folder, 'grids-base').stimuli.count).toBe(8);
    const crop = manifest(folder, 'glyphs-crop');
    expect(crop.stimuli.count).toBe(12);
    expect(crop.preprocessing).toMatchObject({ fit: 'crop', interpolation: 'bilinear', shorterSide: 64 });

    const displays = manifest(folder, 'displays-base');
    expect(displays.stimuli.count).toBe(20);
    expect(displays.stimuli.categories).toContain('square');
    expect(displays.stimuli.categories.length).toBeGreaterThan(1);
  }, 300_000);
});
