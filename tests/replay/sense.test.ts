import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/record/record-snapshot.js';
import { senseSites } from '../../src/replay/sense.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { readSensitivityTable } from '../../src/snapshot/tables.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

// The comparisons with PyTorch (autograd and float64 finite differences) are in
// tests/reference/sensitivity-autograd.test.ts; this file checks exact properties on small networks.

/** input [N, 2, 4, 4] → Relu "act" → GlobalAveragePool → Flatten "v" → Mul(v, v) "square" [N, 2]. */
function quadraticModel(): Uint8Array {
  const model: onnxProto.onnx.IModelProto = {
    irVersion: 8,
    opsetImport: [{ domain: '', version: 13 }],
    graph: {
      name: 'quadratic',
      node: [
        { name: 'r', opType: 'Relu', input: ['input'], output: ['act'] },
        { name: 'g', opType: 'GlobalAveragePool', input: ['act'], output: ['gap'] },
        { name: 'f', opType: 'Flatten', input: ['gap'], output: ['v'] },
        { name: 'm', opType: 'Mul', input: ['v', 'v'], output: ['square'] },
      ],
      input: [{ name: 'input', type: { tensorType: { elemType: 1, shape: { dim: [{ dimParam: 'batch' }, { dimValue: 2 }, { dimValue: 4 }, { dimValue: 4 }] } } } }],
      output: [{ name: 'square', type: { tensorType: { elemType: 1 } } }],
    },
  };
  return onnxProto.onnx.ModelProto.encode(model).finish();
}

describe('senseSites (exact properties on small networks)', () => {
  let dir: string;
  let linear: string;
  let residual: string;
  let stim: { npy: string; labels: string };
  let weights: Float32Array; // Wfc [C=8, classes=2] of `linear`

  beforeAll(async () => {
    dir = tempFolder();
    linear = join(dir, 'linear.onnx');
    const bytes = buildTinyNet({ bias: true, seed: 21, classes: 2 });
    writeFileSync(linear, bytes);
    writeFileSync(join(dir, 'linear.json'), JSON.stringify({ outputs: { name: 'logits', kinds: ['cat', 'dog'] } }));
    const decoded = onnxProto.onnx.ModelProto.decode(bytes);
    const w = decoded.graph!.initializer!.find((t) => t.name === 'Wfc')!;
    const raw = w.rawData!;
    weights = new Float32Array(raw.buffer.slice(raw.byteOffset, raw.byteOffset + raw.byteLength));
    residual = join(dir, 'residual.onnx');
    writeFileSync(residual, buildTinyNet({ bias: true, seed: 22, widths: [4, 4, 6], residual: true }));
    stim = writeStimuliNpy(dir, [9, 3, 16, 16], 5); // labels cat, dog, cat;dog repeating
    await recordSnapshot({ model: linear, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base-linear'), layers: 'all', batch: 4, threads: 1 });
    await recordSnapshot({ model: residual, stimuli: stim.npy, labels: stim.labels, out: join(dir, 'base-residual'), layers: 'all', batch: 4, threads: 1 });
  });

  /** Per-stimulus values of `flat` [N, 8] from the baseline. */
  async function flatValues(): Promise<Float32Array> {
    return openSnapshot(join(dir, 'base-linear')).readChannelMeans('flat');
  }

  it('senseSites offset at the input of a linear readout equals its weight matrix (∂(xW + b)/∂x_k = W_k)', async () => {
    const result = await senseSites({ model: linear, stimuli: stim.npy, site: 'flat', kind: 'offset', threads: 1 });
    const s = result.sites[0]!;
    expect(s.categories).toEqual(['cat', 'dog']); // named by the sidecar's outputs.kinds
    let largest = 0;
    for (const w of weights) largest = Math.max(largest, Math.abs(w));
    for (let i = 0; i < weights.length; i++) {
      // linear in b: the central difference is exact up to float32 rounding of y (~ε·|y|/h)
      expect(Math.abs(s.sensitivity[i]! - weights[i]!) / largest).toBeLessThanOrEqual(1e-4);
      expect(s.fdError[i]! / largest).toBeLessThanOrEqual(1e-4);
    }
  });

  it('senseSites gain at the input of a linear readout equals mean_n x_nk·W_kc, over all stimuli, --stimuli-of dog and each', async () => {
    const x = await flatValues();
    const labels = openSnapshot(join(dir, 'base-linear')).stimuli.labels;
    const C = 8;
    const expected = (use: (n: number, c: number) => boolean): Float64Array => {
      const out = new Float64Array(C * 2);
      for (let c = 0; c < 2; c++) {
        let n = 0;
        for (let s = 0; s < labels.length; s++) {
          if (!use(s, c)) continue;
          n++;
          for (let k = 0; k < C; k++) out[k * 2 + c] += x[s * C + k]! * weights[k * 2 + c]!;
        }
        for (let k = 0; k < C; k++) out[k * 2 + c] /= n;
      }
      return out;
    };
    const names = ['cat', 'dog'];
    const cases: Array<[string | undefined, (n: number, c: number) => boolean, number[]]> = [
      [undefined, () => true, [9, 9]],
      ['dog', (n) => labels[n]!.includes('dog'), [6, 6]],
      ['each', (n, c) => labels[n]!.includes(names[c]!), [6, 6]],
    ];
    for (const [stimuliOf, use, counts] of cases) {
      const result = await senseSites({ model: linear, from: join(dir, 'base-linear'), site: 'flat', kind: 'gain', threads: 1, ...(stimuliOf ? { stimuliOf } : {}) });
      const s = result.sites[0]!;
      expect(Array.from(s.count), String(stimuliOf)).toEqual(counts);
      const want = expected(use);
      let largest = 0;
      for (const v of want) largest = Math.max(largest, Math.abs(v));
      for (let i = 0; i < want.length; i++) expect(Math.abs(s.sensitivity[i]! - want[i]!) / largest, `${stimuliOf} [${i}]`).toBeLessThanOrEqual(1e-4);
    }
  });

  it('senseSites from a baseline equals senseSites from runs of the whole network, for a site with two boundary tensors (residual Add)', async () => {
    // site conv1 feeds res = conv1 + pool0, so the downstream part reads conv1 (the site) and pool0
    const fromBaseline = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'conv1', kind: 'gain', threads: 1 });
    const fromNetwork = await senseSites({ model: residual, stimuli: stim.npy, labels: stim.labels, site: 'conv1', kind: 'gain', threads: 1, batch: 4 });
    expect(fromBaseline.source).toBe('baseline');
    expect(fromNetwork.source).toBe('network');
    const a = fromBaseline.sites[0]!;
    const b = fromNetwork.sites[0]!;
    expect(b.prefixRuns).toBe(3);
    expect(a.prefixRuns).toBe(0);
    let largest = 0;
    for (const v of a.sensitivity) largest = Math.max(largest, Math.abs(v));
    for (let i = 0; i < a.sensitivity.length; i++) expect(Math.abs(a.sensitivity[i]! - b.sensitivity[i]!) / largest).toBeLessThanOrEqual(1e-5);
  });

  it('senseSites on a quadratic readout gives the exact 2·m² by both methods, the curvature h·m² as fd_error, and warns on it only for the secant', async () => {
    // y_c = (g_c·m_c)² with m_c the spatial mean of channel c: ∂y_c/∂g_k = 2m_c² δ_kc at g = 1. A central
    // difference is exact for a quadratic (so D(h) = D(h/2) and Richardson's shift is 0); the one-sided
    // ones give m²(2 ± h), so fd_error = |D₊ − D₋|/2 = h·m², h/2 of the largest sensitivity: 10% at
    // h = 0.2 — curvature, not error. The secant warns on it above 5%; Richardson warns on its shift.
    const folder = join(dir, 'quadratic');
    mkdirSync(folder);
    const quadratic = join(folder, 'quadratic.onnx');
    writeFileSync(quadratic, quadraticModel());
    const input = writeStimuliNpy(folder, [4, 2, 4, 4], 29);
    const pixels = parseNpy(readFileSync(input.npy)).data as Float32Array; // uniform [0, 1): Relu is the identity
    const m2 = [0, 1].map((c) => {
      let sum = 0;
      for (let n = 0; n < 4; n++) {
        let mean = 0;
        for (let p = 0; p < 16; p++) mean += pixels[(n * 2 + c) * 16 + p]! / 16;
        sum += mean * mean;
      }
      return sum / 4;
    });
    for (const method of ['secant', 'richardson'] as const) {
      for (const step of [0.2, 0.01]) {
        const result = await senseSites({ model: quadratic, stimuli: input.npy, site: 'act', step, method, threads: 1 });
        const s = result.sites[0]!;
        expect(s.method).toBe(method);
        for (let k = 0; k < 2; k++) {
          for (let c = 0; c < 2; c++) {
            const i = k * 2 + c;
            expect(s.sensitivity[i], `${method} ${step}`).toBeCloseTo(k === c ? 2 * m2[c]! : 0, 4);
            expect(s.fdError[i], `${method} ${step}`).toBeCloseTo(k === c ? step * m2[c]! : 0, 4);
            if (method === 'richardson') expect(s.extrapolationShift![i]).toBeCloseTo(0, 4);
            else expect(s.extrapolationShift).toBeNull();
          }
        }
        if (method === 'secant' && step === 0.2) {
          expect(result.warnings).toHaveLength(1);
          expect(result.warnings[0]).toMatch(/site "act": fd_error \(curvature within ±0\.2\) exceeds 5\.0% of the category's largest \|sensitivity\| for 2 of 4 values/);
        } else expect(result.warnings, `${method} ${step}`).toEqual([]);
      }
    }
  });

  it('senseSites results do not depend on how rows are batched (7 rows per run vs 256)', async () => {
    const small = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', kind: 'gain', threads: 1, rowsPerRun: 7, method: 'richardson' });
    const large = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', kind: 'gain', threads: 1, method: 'richardson' });
    const a = small.sites[0]!;
    const b = large.sites[0]!;
    expect(a.runs).toBe(Math.ceil(a.rows / 7));
    expect(a.rows + a.skippedRows).toBe(9 * (1 + 4 * 4)); // Richardson: ±h and ±h/2 per channel
    expect(b.skippedRows).toBe(a.skippedRows);
    let largest = 0;
    for (const v of b.sensitivity) largest = Math.max(largest, Math.abs(v));
    for (let i = 0; i < a.sensitivity.length; i++) {
      expect(Math.abs(a.sensitivity[i]! - b.sensitivity[i]!) / largest).toBeLessThanOrEqual(1e-6);
      expect(Math.abs(a.fdError[i]! - b.fdError[i]!) / largest).toBeLessThanOrEqual(1e-6);
    }
  });

  it('senseSites --method richardson equals (4·S(h/2) − S(h))/3 of two secant runs, shares their fd_error, and runs twice their rows', async () => {
    // Richardson extrapolation of central differences (e.g. Burden & Faires, Numerical Analysis, §4.2,
    // from memory): R = (4·D(h/2) − D(h))/3 — here an identity between Sonde's own runs at the same gains.
    const h = 0.01;
    const run = async (method: 'secant' | 'richardson', step: number) => (await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', threads: 1, method, step })).sites[0]!;
    const rich = (await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', threads: 1, step: h, method: 'richardson' })).sites[0]!;
    const full = await run('secant', h);
    const half = await run('secant', h / 2);
    expect(rich.method).toBe('richardson');
    expect(rich.rows + rich.skippedRows).toBe(9 * (1 + 4 * 4));
    expect(full.rows + full.skippedRows).toBe(9 * (1 + 2 * 4));
    expect(rich.skippedRows).toBe(2 * full.skippedRows);
    let largest = 0;
    for (const v of rich.sensitivity) largest = Math.max(largest, Math.abs(v));
    for (let i = 0; i < rich.sensitivity.length; i++) {
      const expected = (4 * half.sensitivity[i]! - full.sensitivity[i]!) / 3;
      expect(Math.abs(rich.sensitivity[i]! - expected) / largest, `[${i}]`).toBeLessThanOrEqual(1e-6);
      expect(Math.abs(rich.extrapolationShift![i]! - Math.abs(half.sensitivity[i]! - full.sensitivity[i]!) / 3) / largest).toBeLessThanOrEqual(1e-6);
      expect(Math.abs(rich.fdError[i]! - full.fdError[i]!) / largest).toBeLessThanOrEqual(1e-6); // the same ±h runs
    }
  });

  it('senseSites rejects an unknown method, naming it', async () => {
    await expect(senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', threads: 1, method: 'forward' as never })).rejects.toThrow(/--method must be "exact" or "richardson" or "secant", got "forward"/);
  });

  it('senseSites all-activations measures every ReLU output upstream of the readout and writes one table block per site (default method exact, recorded in the metadata)', async () => {
    const out = join(dir, 'all.arrow');
    const result = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'all-activations', threads: 1, out });
    expect(result.sites.map((s) => s.layer)).toEqual(['relu0', 'relu1', 'relu2']);
    const file = readSensitivityTable(out);
    expect(file.blocks.map((b) => [b.layer, b.channels, b.kind, b.step])).toEqual([['relu0', 4, 'gain', 0], ['relu1', 4, 'gain', 0], ['relu2', 6, 'gain', 0]]);
    expect(file.metadata['sonde.method']).toBe('exact');
    expect(file.categories).toEqual(['0', '1', '2', '3', '4']); // no sidecar: unit indices as text
    expect(file.metadata['sonde.readout']).toBe('logits');
    // the downstream share falls with depth: fewer multiply-adds remain below a later site
    expect(result.sites[0]!.downstreamShare).toBeGreaterThan(result.sites[1]!.downstreamShare);
    expect(result.sites[1]!.downstreamShare).toBeGreaterThan(result.sites[2]!.downstreamShare);
  });
});
