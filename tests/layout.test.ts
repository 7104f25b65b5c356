/**
 * The layout rule of DEVELOPERS.md: the parts of src/ form a stack, and a part imports only parts below
 * it. This test reads every import of src/ (static, type-only, re-exports, dynamic `import()` and
 * `new URL('…', import.meta.url)` of a module) and fails on any import that runs upward or sideways, on
 * a part the stack does not place, and when DEVELOPERS.md's layer table lists another order. An exact
 * property of the source tree, no external reference needed.
 */
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { join, posix, relative, sep } from 'node:path';
import { describe, expect, it } from 'vitest';

const ROOT = join(import.meta.dirname, '..');
const SRC = join(ROOT, 'src');

/**
 * The stack, from the ground up. A part is a folder of src/ or a file directly in it. Each part may
 * import itself and the parts before it, never one after it (nor one at the same place in the list).
 */
const LAYERS: readonly string[] = [
  // ground: no imports of the project's own, or only of the files above them in this list
  'errors.ts',
  'version.ts',
  'json.ts',
  'random.ts',
  'format.ts',
  'malloc-arenas.ts',
  // pure numbers; the disk's safe-file primitives
  'stats',
  'analysis',
  'disk',
  // the runtime, the model graph, stimuli
  'session',
  'graph',
  'stimuli',
  // files on disk: snapshots and tables; modulation specs resolved to vectors
  'snapshot',
  'modulation',
  'outputs',
  // workflows
  'export',
  'record',
  'compare',
  'replay',
  // running workflows as cluster job arrays
  'cluster',
  // presentation and the demo
  'report',
  'demo',
  // shells
  'cli',
  'bench',
  'index.ts',
];

function sourceFiles(folder: string): string[] {
  return readdirSync(folder).flatMap((name) => {
    const path = join(folder, name);
    return statSync(path).isDirectory() ? sourceFiles(path) : path.endsWith('.ts') ? [path] : [];
  });
}

/** The part a path under src/ belongs to. */
function partOf(pathUnderSrc: string): string {
  return pathUnderSrc.split('/')[0]!.replace(/\.js$/, '.ts');
}

/** Relative module specifiers a file imports (comments removed first, so examples in docs do not count). */
function importsOf(text: string): string[] {
  const code = text.replace(/\/\*[\s\S]*?\*\//g, ' ').replace(/(^|[^:'"`])\/\/[^\n]*/g, '$1');
  const found: string[] = [];
  const patterns = [
    /\b(?:import|export)\s+(?:type\s+)?(?:[\w*\s{},$]*?)\s*from\s*'(\.[^']+)'/g,
    /\bimport\s*'(\.[^']+)'/g,
    /\bimport\(\s*'(\.[^']+)'\s*\)/g,
    /new URL\(\s*'(\.[^']+\.js)'\s*,\s*import\.meta\.url\s*\)/g,
  ];
  for (const pattern of patterns) for (const match of code.matchAll(pattern)) found.push(match[1]!);
  return found;
}

interface ImportEdge {
  file: string;
  target: string;
  from: string;
  to: string;
}

function edges(): ImportEdge[] {
  const out: ImportEdge[] = [];
  for (const file of sourceFiles(SRC)) {
    const own = relative(SRC, file).split(sep).join('/');
    for (const spec of importsOf(readFileSync(file, 'utf8'))) {
      const target = posix.normalize(posix.join(posix.dirname(own), spec));
      if (target.startsWith('..')) continue; // outside src/ (package.json, models, fixtures)
      out.push({ file: own, target, from: partOf(own), to: partOf(target) });
    }
  }
  return out;
}

describe('src/ layout', () => {
  it('LAYERS places every folder and file directly under src/', () => {
    const parts = readdirSync(SRC).filter((name) => statSync(join(SRC, name)).isDirectory() || name.endsWith('.ts'));
    const unplaced = parts.filter((p) => !LAYERS.includes(p));
    expect(unplaced, `add ${unplaced.join(', ')} to LAYERS in tests/layout.test.ts and to DEVELOPERS.md's layer table`).toEqual([]);
  });

  it('every import of src/ runs downward in LAYERS (a part imports only itself and the parts below it)', () => {
    const all = edges();
    expect(all.length).toBeGreaterThan(100); // the scan found the imports at all
    const rank = new Map(LAYERS.map((part, i) => [part, i]));
    const upward = all
      .filter((e) => e.from !== e.to && !(rank.get(e.to)! < rank.get(e.from)!))
      .map((e) => `${e.file} imports ${e.target} (${e.to} is not below ${e.from})`);
    expect(upward).toEqual([]);
  });

  it('importsOf(text) finds static, type-only, re-export, side-effect, dynamic and URL imports and ignores comments', () => {
    const text = [
      "import { a } from './a.js';",
      "import type { B } from '../b/b.js';",
      "export { c, type D } from './c.js';",
      "export * as e from './e/index.js';",
      "import './side.js';",
      "const f = await import('./f.js');",
      "const g = new URL('../cli/g.js', import.meta.url);",
      "// import { no } from './comment.js';",
      "/** import { no } from './doc.js'; */",
      "import { readFileSync } from 'node:fs';",
    ].join('\n');
    expect(importsOf(text)).toEqual(['./a.js', '../b/b.js', './c.js', './e/index.js', './side.js', './f.js', '../cli/g.js']);
  });

  it("DEVELOPERS.md's layer table lists the parts of LAYERS, top first", () => {
    const guide = readFileSync(join(ROOT, 'DEVELOPERS.md'), 'utf8');
    const table = guide.slice(guide.indexOf('## Layers'));
    const listed = [...table.matchAll(/^\| `src\/([^`]+?)\/?` \|/gm)].map((m) => m[1]!);
    expect(listed).toEqual([...LAYERS].reverse());
  });

  it('no file under src/ is much over 700 lines (split by concept; see DEVELOPERS.md)', () => {
    const long = sourceFiles(SRC)
      .map((file) => ({ file: relative(ROOT, file), lines: readFileSync(file, 'utf8').split('\n').length }))
      .filter((f) => f.lines > 700)
      .map((f) => `${f.file}: ${f.lines} lines`);
    expect(long).toEqual([]);
  });
});
