import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import sharp from 'sharp';
import { beforeAll, describe, expect, it } from 'vitest';
import { openStimulusSource, type StimulusSourceOptions } from '../../src/stimuli/source.js';
import { tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

const options = (extra: Partial<StimulusSourceOptions> = {}): StimulusSourceOptions => ({ preprocessing: { size: [8, 8], mean: [0, 0, 0], std: [1, 1, 1], bgr: false }, channels: 3, ...extra });

async function png(path: string, value: number): Promise<void> {
  await sharp(Buffer.alloc(8 * 8 * 3, value), { raw: { width: 8, height: 8, channels: 3 } }).png().toFile(path);
}

let dir = '';
beforeAll(() => {
  dir = tempFolder('sonde-source-');
});

/** A folder laid out as `stimuli make` writes it: images/000000.png … and labels.csv (path,label). */
async function listedFolder(name: string, rows: Array<[string, string]>): Promise<string> {
  const folder = join(dir, name);
  mkdirSync(join(folder, 'images'), { recursive: true });
  for (const [i, [file]] of rows.entries()) await png(join(folder, file), 10 * i);
  writeFileSync(join(folder, 'labels.csv'), ['path,label', ...rows.map(([file, label]) => `${file},${label}`)].join('\n') + '\n');
  return folder;
}

describe('openStimulusSource (labels files)', () => {
  it('openStimulusSource reads a folder through the labels file it holds (same listing as passing the CSV)', async () => {
    const folder = await listedFolder('listed', [['images/a.png', 'ring'], ['images/b.png', ''], ['images/c.png', 'ring;disc']]);
    const source = openStimulusSource(folder, options());
    expect(source.kind).toBe('csv');
    expect(source.labels).toEqual([['ring'], [], ['ring', 'disc']]);
    expect(source.ids).toEqual(['images/a.png', 'images/b.png', 'images/c.png']);
    expect(openStimulusSource(join(folder, 'labels.csv'), options()).ids).toEqual(source.ids);
    expect(source.description).toMatch(/labels\.csv/);
  });

  it('openStimulusSource refuses a folder whose labels file leaves images out, saying what to pass', async () => {
    const folder = await listedFolder('partial', [['images/a.png', 'ring']]);
    await png(join(folder, 'images', 'stray.png'), 90);
    expect(() => openStimulusSource(folder, options())).toThrow(/leaves out 1 image\(s\) of the folder \(images\/stray\.png\)/);
    try {
      openStimulusSource(folder, options());
    } catch (error) {
      expect((error as { hint?: string }).hint).toMatch(/--stimuli .*labels\.csv .*--labels folders/);
    }
  });

  it('openStimulusSource refuses a folder with two labels files, or one of a form it does not read', async () => {
    const folder = await listedFolder('two', [['images/a.png', 'ring']]);
    writeFileSync(join(folder, 'more.csv'), 'path,label\nimages/a.png,disc\n');
    expect(() => openStimulusSource(folder, options())).toThrow(/holds 2 labels files \(labels\.csv, more\.csv\)/);
    const foreign = join(dir, 'foreign');
    mkdirSync(join(foreign, 'cat'), { recursive: true });
    mkdirSync(join(foreign, 'dog'));
    await png(join(foreign, 'cat', 'a.png'), 1);
    await png(join(foreign, 'dog', 'b.png'), 2);
    writeFileSync(join(foreign, 'meta.csv'), 'file,class\ncat/a.png,dog\n');
    expect(() => openStimulusSource(foreign, options())).toThrow(/meta\.csv with header "file,class", a labels file Sonde does not read/);
    // explicit choice: label by subfolder
    expect(openStimulusSource(foreign, options({ labelsFile: 'folders' })).labels).toEqual([['cat'], ['dog']]);
    // a CSV that names no label column is not a labels file
    writeFileSync(join(foreign, 'meta.csv'), 'file,photographer\ncat/a.png,me\n');
    expect(openStimulusSource(foreign, options()).labels).toEqual([['cat'], ['dog']]);
  });

  it('openStimulusSource reads a .npy with the labels file beside it, and without labels only when told (--labels none)', () => {
    const folder = join(dir, 'arr');
    mkdirSync(folder);
    const { npy } = writeStimuliNpy(folder, [3, 3, 8, 8], 5, ['cat', '""', 'dog']);
    expect(openStimulusSource(npy, options()).labels).toEqual([['cat'], [], ['dog']]);
    expect(openStimulusSource(npy, options()).description).toMatch(/with labels .*labels\.csv/);
    expect(openStimulusSource(npy, options({ labelsFile: 'none' })).labels).toEqual([[], [], []]);
    // the folder itself: a single array and its row-order list
    expect(openStimulusSource(folder, options()).labels).toEqual([['cat'], [], ['dog']]);
  });

  it('openStimulusSource refuses a .npy whose neighbouring labels file is not a row-order list, or of the wrong length', () => {
    const folder = join(dir, 'arr2');
    mkdirSync(folder);
    const { npy, labels } = writeStimuliNpy(folder, [3, 3, 8, 8], 5);
    writeFileSync(labels, 'path,label\na.png,cat\n');
    expect(() => openStimulusSource(npy, options())).toThrow(/labels\.csv \(header "path,label"\) beside it/);
    writeFileSync(labels, 'label\ncat\n');
    expect(() => openStimulusSource(npy, options())).toThrow(/labels file .*labels\.csv .* has 1 rows but .* holds 3 stimuli/);
  });

  it('openStimulusSource says so when a class-folder tree has a single category, and refuses images outside the subfolders', async () => {
    const folder = join(dir, 'single');
    mkdirSync(join(folder, 'cat'), { recursive: true });
    await png(join(folder, 'cat', 'a.png'), 1);
    const notices: string[] = [];
    const source = openStimulusSource(folder, options({ onNotice: (t) => notices.push(t) }));
    expect(source.labels).toEqual([['cat']]);
    expect(notices).toHaveLength(1);
    expect(notices[0]).toMatch(/single category subfolder "cat"/);
    await png(join(folder, 'loose.png'), 3);
    expect(() => openStimulusSource(folder, options())).toThrow(/holds 1 image\(s\) outside its category subfolders \(loose\.png\)/);
  });
});
