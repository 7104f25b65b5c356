import { mkdtemp, readFile, readdir, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runCli } from '../../src/cli/run.js';

let root = '';
beforeAll(async () => {
  root = await mkdtemp(join(tmpdir(), 'sonde-demo-cli-'));
});
afterAll(async () => {
  await rm(root, { recursive: true, force: true });
});

async function run(argv: string[]): Promise<{ code: number; stdout: string; stderr: string }> {
  let stdout = '';
  let stderr = '';
  const code = await runCli(argv, { stdout: (t) => (stdout += t), stderr: (t) => (stderr += t) });
  return { code, stdout, stderr };
}

describe('sonde stimuli make', () => {
  it('stimuli make --format png writes images/, labels.csv and set.json and exits 0', async () => {
    const out = join(root, 'png');
    const result = await run(['stimuli', 'make', '--out', out, '--count', '4', '--seed', '9', '--kinds', 'disc,ring', '--clutter', '0.2', '--noise', '0.05']);
    expect(result.code).toBe(0);
    expect(result.stdout).toMatch(/wrote 4 displays \(png\)/);
    expect((await readdir(join(out, 'images'))).sort()).toEqual(['000000.png', '000001.png', '000002.png', '000003.png']);
    const description = JSON.parse(await readFile(join(out, 'set.json'), 'utf8')) as Record<string, unknown>;
    expect(description).toMatchObject({ seed: 9, count: 4, kinds: ['disc', 'ring'], clutter: 0.2, noise: 0.05, cued: null });
  });

  it('stimuli make --cued KIND --format npy writes a balanced cued set', async () => {
    const out = join(root, 'npy');
    const result = await run(['stimuli', 'make', '--out', out, '--count', '8', '--seed', '2', '--cued', 'star', '--format', 'npy']);
    expect(result.code).toBe(0);
    const labels = (await readFile(join(out, 'labels.csv'), 'utf8')).trimEnd().split('\n').slice(1);
    expect(labels.filter((label) => label.split(';').includes('star'))).toHaveLength(4);
  });

  it('stimuli make exits 2 with a one-line message for bad options', async () => {
    const cases: Array<[string[], RegExp]> = [
      [['--kinds', 'disc,rnig'], /--kinds "rnig" is not a glyph kind \(closest: "ring"/],
      [['--clutter', 'lots'], /--clutter "lots" is not a number/],
      [['--noise', '2'], /noise = 2 is not valid/],
      [['--format', 'jpeg'], /--format "jpeg" is not a stimulus format/],
      [['--cued', 'disc', '--count', '5'], /count = 5 is not valid \(a cued set needs an even count/],
    ];
    for (const [extra, message] of cases) {
      const base = ['stimuli', 'make', '--out', join(root, 'bad'), '--count', '4', '--seed', '1'];
      const result = await run([...base, ...extra]);
      expect(result.code, extra.join(' ')).toBe(2);
      expect(result.stderr).toMatch(message);
      expect(result.stderr.trimEnd().split('\n')).toHaveLength(1);
    }
  });

  it('stimuli make without --seed exits 2 (commander reports the missing option)', async () => {
    const result = await run(['stimuli', 'make', '--out', join(root, 'x'), '--count', '4']);
    expect(result.code).toBe(2);
    expect(result.stderr).toMatch(/--seed/);
  });
});
