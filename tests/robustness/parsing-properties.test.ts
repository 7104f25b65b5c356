/**
 * Property-based tests (fast-check) of everything Sonde parses from files it did not write itself in
 * this run: snapshot manifests, layer-file paths inside them, partial-statistics files, `--shard K/N`,
 * and modulation specs with keys they do not know. The oracles are exact properties: round trips,
 * "only one-line UsageErrors", and an independent segment-stack model of path normalisation.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve, sep } from 'node:path';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { UsageError } from '../../src/errors.js';
import { parseModulationSpec } from '../../src/modulation/spec.js';
import { readPartial } from '../../src/record/partial-file.js';
import { parseShard, shardRange } from '../../src/record/shard.js';
import { assertInside, FORMAT_VERSION, validateManifest, type SnapshotManifest } from '../../src/snapshot/manifest.js';

const folder = mkdtempSync(join(tmpdir(), 'sonde-prop-'));

/** Runs `run`; any error must be a one-line UsageError. */
function onlyUsageErrors(run: () => unknown): boolean {
  try {
    run();
  } catch (error) {
    if (!(error instanceof UsageError)) throw error;
    expect(error.message).not.toContain('\n');
  }
  return true;
}

const hex64 = fc.stringMatching(/^[0-9a-f]{64}$/);
const name = fc.string({ minLength: 1, maxLength: 16 });

/** Valid manifests: any names, shapes, dtypes, keeps, optional shard; files are unique and inside. */
const manifestArb: fc.Arbitrary<SnapshotManifest> = fc
  .record({
    count: fc.integer({ min: 1, max: 10_000 }),
    names: fc.uniqueArray(name, { minLength: 1, maxLength: 6 }),
    shard: fc.option(fc.record({ count: fc.integer({ min: 1, max: 8 }), pick: fc.nat() }), { nil: undefined }),
    digest: hex64,
    complete: fc.boolean(),
  })
  .chain(({ count, names, shard, digest, complete }) =>
    fc
      .tuple(
        ...names.map(() =>
          fc.record({
            shape: fc.array(fc.integer({ min: 1, max: 64 }), { minLength: 0, maxLength: 3 }),
            dtype: fc.constantFrom('float32' as const, 'float16' as const),
            keep: fc.constantFrom('full' as const, 'channels' as const),
            op: fc.constantFrom('Relu', 'Conv', 'MaxPool', 'Gemm'),
            sha256: hex64,
          }),
        ),
      )
      .map((layers) => {
        const total = shard ? Math.max(count, shard.count) : count;
        const k = shard ? 1 + (shard.pick % shard.count) : 1;
        const range = shard ? shardRange(k, shard.count, total) : { start: 0, end: count };
        const manifest: SnapshotManifest = {
          format: FORMAT_VERSION,
          tool: { name: 'sonde', version: '0.1.0' },
          model: { file: 'm.onnx', sha256: digest, input: { name: 'input', shape: [3, 8, 8] } },
          stimuli: { source: 'array', count: range.end - range.start, digest, listingDigest: digest, categories: ['a', 'b'] },
          preprocessing: null,
          modulation: null,
          readout: null,
          baseline: null,
          run: { mode: 'full', batch: 16, threads: 0 },
          created: '2026-01-01T00:00:00.000Z',
          layers: layers.map((l, i) => ({ name: names[i]!, op: l.op, depth: i, shape: l.shape, dtype: l.dtype, keep: l.keep, file: `layers/${String(i).padStart(3, '0')}.arrow`, sha256: l.sha256, bytes: 100 + i, rows: range.end - range.start })),
          complete,
        };
        if (shard) manifest.shard = { index: k, count: shard.count, stimuli: [range.start, range.end - 1], total };
        return manifest;
      }),
  );

/** Does `file` stay inside the folder? Independent model: a stack of path segments. */
function insideBySegments(file: string): boolean {
  if (file.startsWith('/') || file.includes('\0')) return false;
  const stack: string[] = [];
  for (const segment of file.split('/')) {
    if (segment === '' || segment === '.') continue;
    if (segment === '..') {
      if (stack.length === 0) return false;
      stack.pop();
    } else stack.push(segment);
  }
  return stack.length > 0;
}

describe('manifest parsing properties', () => {
  it('validateManifest(JSON round trip of a valid manifest) returns it unchanged (fast-check)', () => {
    fc.assert(
      fc.property(manifestArb, (manifest) => {
        expect(validateManifest(JSON.parse(JSON.stringify(manifest)), folder)).toEqual(manifest);
      }),
      { numRuns: 300 },
    );
  });

  it('validateManifest(any JSON value) throws nothing but one-line UsageErrors (fast-check)', () => {
    fc.assert(fc.property(fc.jsonValue(), (value) => onlyUsageErrors(() => validateManifest(value, folder))), { numRuns: 500 });
  });

  it('validateManifest(valid manifest with one field replaced by junk) throws nothing but UsageErrors (fast-check)', () => {
    const junk = fc.oneof(fc.jsonValue(), fc.constantFrom(null, -1, 0, 1.5, '', [], {}, '../x', '/etc/passwd', 'a\0b'));
    const paths: ReadonlyArray<readonly string[]> = [
      ['format'], ['model'], ['model', 'sha256'], ['stimuli'], ['stimuli', 'count'], ['stimuli', 'digest'], ['run'], ['run', 'batch'], ['baseline'],
      ['layers'], ['layers', '0'], ['layers', '0', 'name'], ['layers', '0', 'file'], ['layers', '0', 'shape'], ['layers', '0', 'dtype'], ['layers', '0', 'keep'],
      ['layers', '0', 'rows'], ['layers', '0', 'sha256'], ['layers', '0', 'from'], ['shard'], ['complete'],
    ];
    fc.assert(
      fc.property(manifestArb, fc.constantFrom(...paths), junk, (manifest, path, value) => {
        const broken = JSON.parse(JSON.stringify(manifest)) as Record<string, unknown>;
        let at: Record<string, unknown> = broken;
        for (const key of path.slice(0, -1)) at = at[key] as Record<string, unknown>;
        at[path[path.length - 1]!] = value;
        return onlyUsageErrors(() => validateManifest(broken, folder));
      }),
      { numRuns: 600 },
    );
  });

  it('assertInside(folder, path) accepts exactly the paths a segment-stack model keeps inside (fast-check)', () => {
    const segment = fc.constantFrom('..', '.', '', 'a', 'layers', 'b.arrow', '...', '..a');
    const pathArb = fc.tuple(fc.boolean(), fc.array(segment, { minLength: 1, maxLength: 6 })).map(([absolute, parts]) => `${absolute ? '/' : ''}${parts.join('/')}`);
    fc.assert(
      fc.property(pathArb, (file) => {
        let accepted: string | null = null;
        try {
          accepted = assertInside(folder, file, 'file');
        } catch (error) {
          expect(error).toBeInstanceOf(UsageError);
        }
        expect(accepted !== null, file).toBe(insideBySegments(file));
        if (accepted !== null) expect(accepted.startsWith(resolve(folder) + sep)).toBe(true);
      }),
      { numRuns: 1000 },
    );
  });
});

describe('other parsers', () => {
  it('parseShard(text) accepts exactly K/N with 1 ≤ K ≤ N, and shardRange covers 0..count-1 (fast-check)', () => {
    fc.assert(
      fc.property(fc.oneof(fc.string({ maxLength: 8 }), fc.tuple(fc.integer({ min: -3, max: 40 }), fc.integer({ min: -3, max: 40 })).map(([k, n]) => `${k}/${n}`)), (text) => {
        const match = /^\s*(\d+)\s*\/\s*(\d+)\s*$/.exec(text);
        const valid = match !== null && Number(match[1]) >= 1 && Number(match[1]) <= Number(match[2]);
        let parsed: { index: number; count: number } | null = null;
        onlyUsageErrors(() => (parsed = parseShard(text)));
        expect(parsed !== null, text).toBe(valid);
      }),
      { numRuns: 500 },
    );
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 64 }), fc.integer({ min: 0, max: 1_000_000 }), (n, extra) => {
        const count = n + extra;
        let next = 0;
        for (let k = 1; k <= n; k++) {
          const { start, end } = shardRange(k, n, count);
          expect(start).toBe(next);
          expect(end).toBeGreaterThan(start);
          next = end;
        }
        expect(next).toBe(count);
      }),
      { numRuns: 300 },
    );
  });

  it('readPartial(file of any JSON or text) throws nothing but one-line UsageErrors (fast-check)', () => {
    const path = join(folder, 'part.json');
    const content = fc.oneof(
      fc.string({ maxLength: 40 }),
      fc.jsonValue().map((v) => JSON.stringify(v) ?? ''),
      fc.record({ kind: fc.constantFrom('sonde.partial', 'x'), version: fc.constantFrom(1, 2, '1'), of: fc.constantFrom('diff', 'tune', 'sense', 'sweep'), shard: fc.jsonValue(), key: fc.jsonValue(), data: fc.jsonValue() }).map((v) => JSON.stringify(v)),
    );
    fc.assert(
      fc.property(content, (text) => {
        writeFileSync(path, text);
        return onlyUsageErrors(() => readPartial(path));
      }),
      { numRuns: 300 },
    );
  });

  it('parseModulationSpec(valid spec plus a key no kind accepts) always refuses it, naming the key (fast-check)', () => {
    const known = new Set(['site', 'kind', 'window', 'allowNegative', 'values', 'strength', 'channels', 'top', 'target', 'rankBy', 'mode', 'sd', 'seed', 'modulations']);
    fc.assert(
      fc.property(fc.string({ minLength: 1, maxLength: 10 }).filter((k) => !known.has(k) && k !== '__proto__'), fc.jsonValue(), (key, value) => {
        const text = JSON.stringify({ site: 'relu1', kind: 'uniform', gain: 1.5, [key]: value });
        let message = '';
        try {
          parseModulationSpec(text, { source: 'extra.json' });
        } catch (error) {
          expect(error).toBeInstanceOf(UsageError);
          message = (error as Error).message;
        }
        expect(message.includes(key) || message.includes(JSON.stringify(key)), message).toBe(true);
      }),
      { numRuns: 300 },
    );
  });
});
