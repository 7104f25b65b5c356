import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { beforeAll, describe, expect, it } from 'vitest';
import { recordSnapshot } from '../../src/pipeline/record-snapshot.js';
import { senseSites, type SiteSensitivity } from '../../src/pipeline/sense.js';
import { openSnapshot } from '../../src/snapshot/snapshot.js';
import { readSensitivityTable } from '../../src/snapshot/tables.js';
import { parseNpy } from '../../src/stimuli/npy.js';
import { buildTinyNet, tempFolder, writeStimuliNpy } from '../helpers/onnx-builder.js';

// PyTorch reference fixtures (tests/reference/make_fixtures.py, Debian python3-torch 1.13, float64):
// gain_exact / offset_exact = autograd Σ_xy (∂y_c/∂a_kxy)·a_kxy and Σ_xy ∂y_c/∂a_kxy at the site,
// batch-averaged; gain_secant / offset_secant = float64 central differences at step 0.01. [C, K].
const FIXTURES = 'tests/reference/fixtures';

function npy64(path: string): Float64Array {
  const t = parseNpy(readFileSync(path), path);
  if (!(t.data instanceof Float64Array)) throw new Error(`${path} is not float64`);
  return t.data;
}

/** max over entries of |a − b| / (largest |reference| of the entry's category); [C, K] row-major. */
function relativeToCategoryMax(a: Float64Array, b: Float64Array, reference: Float64Array, C: number, K: number, slack?: Float64Array): number {
  let worst = 0;
  for (let c = 0; c < K; c++) {
    let largest = 0;
    for (let k = 0; k < C; k++) largest = Math.max(largest, Math.abs(reference[k * K + c]!));
    for (let k = 0; k < C; k++) {
      const i = k * K + c;
      const excess = Math.abs(a[i]! - b[i]!) - (slack ? slack[i]! : 0);
      worst = Math.max(worst, excess / largest);
    }
  }
  return worst;
}

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

interface Fixture {
  site: string;
  gainExact: Float64Array;
  offsetExact: Float64Array;
  gainSecant: Float64Array;
  offsetSecant: Float64Array;
}

function fixture(name: string): Fixture {
  const folder = join(FIXTURES, name, 'sensitivity');
  const site = JSON.parse(readFileSync(join(folder, 'site.json'), 'utf8')) as { site: string; step: number };
  expect(site.step).toBe(0.01); // the fixtures use Sonde's default step
  return {
    site: site.site,
    gainExact: npy64(join(folder, 'gain_exact.npy')),
    offsetExact: npy64(join(folder, 'offset_exact.npy')),
    gainSecant: npy64(join(folder, 'gain_secant.npy')),
    offsetSecant: npy64(join(folder, 'offset_secant.npy')),
  };
}

async function sense(model: string, site: string, kind: 'gain' | 'offset', step?: number): Promise<SiteSensitivity> {
  const result = await senseSites({ model, stimuli: join(FIXTURES, 'inputs.npy'), site, kind, threads: 1, ...(step ? { step } : {}) });
  return result.sites[0]!;
}

describe('senseSites vs PyTorch autograd (tests/reference fixtures)', () => {
  it('senseSites on the bias-free network (relu4) matches the float64 secant within 1e-2 and autograd within 2e-2, per category', async () => {
    const f = fixture('homogeneous');
    const model = join(FIXTURES, 'homogeneous.onnx');
    for (const kind of ['gain', 'offset'] as const) {
      const s = await sense(model, f.site, kind);
      const [exact, secant] = kind === 'gain' ? [f.gainExact, f.gainSecant] : [f.offsetExact, f.offsetSecant];
      expect(s.channels * s.categories.length).toBe(exact.length);
      expect(relativeToCategoryMax(s.sensitivity, secant, exact, s.channels, 10), kind).toBeLessThanOrEqual(1e-2);
      expect(relativeToCategoryMax(s.sensitivity, exact, exact, s.channels, 10), kind).toBeLessThanOrEqual(2e-2);
    }
  });

  it('senseSites gain values on the bias-free network sum over channels to the mean logits (Euler, degree-1 homogeneity; logits from PyTorch fc.npy)', async () => {
    // Euler's theorem: a positively homogeneous f of degree 1 satisfies Σ_k g_k ∂f/∂g_k = f at g = 1.
    const f = fixture('homogeneous');
    const s = await sense(join(FIXTURES, 'homogeneous.onnx'), f.site, 'gain');
    const logits = parseNpy(readFileSync(join(FIXTURES, 'homogeneous', 'fc.npy'))).data as Float32Array; // [4, 10]
    let largest = 0;
    for (let i = 0; i < logits.length; i++) largest = Math.max(largest, Math.abs(logits[i]!));
    for (let c = 0; c < 10; c++) {
      let sum = 0;
      for (let k = 0; k < s.channels; k++) sum += s.sensitivity[k * 10 + c]!;
      let mean = 0;
      for (let n = 0; n < 4; n++) mean += logits[n * 10 + c]! / 4;
      // secants, not exact derivatives: a kink crossed by the step moves each term slightly (1e-2 of max |y|)
      expect(Math.abs(sum - mean) / largest, `category ${c}`).toBeLessThanOrEqual(1e-2);
    }
  });

  it('senseSites on the residual network (ReLU6 site, 480 channels) matches the float64 secant within 1e-2 and autograd within 2e-2 plus its fd_error', async () => {
    const f = fixture('residual');
    const model = join(FIXTURES, 'residual.onnx');
    for (const kind of ['gain', 'offset'] as const) {
      const s = await sense(model, f.site, kind);
      const [exact, secant] = kind === 'gain' ? [f.gainExact, f.gainSecant] : [f.offsetExact, f.offsetSecant];
      expect(s.channels).toBe(480);
      // ReLU6 leaves whole channels at exactly 0 for some stimuli: their gain rows are skipped (they would
      // repeat the unperturbed run); the agreement below covers those channels too. Offsets are never skipped.
      if (kind === 'gain') expect(s.skippedRows).toBeGreaterThan(0);
      else expect(s.skippedRows).toBe(0);
      expect(s.rows + s.skippedRows).toBe(4 * (1 + 2 * 480));
      expect(relativeToCategoryMax(s.sensitivity, secant, exact, 480, 10), kind).toBeLessThanOrEqual(1e-2);
      // The step crosses ReLU6 kinks here: PyTorch's own float64 secant differs from autograd by up to
      // 3.6e-2 (gain) of the category maximum. The exact derivative must lie within the reported error
      // bar fd_error plus the 2e-2 tolerance...
      expect(relativeToCategoryMax(s.sensitivity, exact, exact, 480, 10, s.fdError), kind).toBeLessThanOrEqual(2e-2);
      // ...and within 2e-2 outright wherever the float64 reference secant itself is within 2e-2 of it.
      const kinked = new Float64Array(exact.length);
      let kinks = 0;
      for (let c = 0; c < 10; c++) {
        let largest = 0;
        for (let k = 0; k < 480; k++) largest = Math.max(largest, Math.abs(exact[k * 10 + c]!));
        for (let k = 0; k < 480; k++) {
          const i = k * 10 + c;
          if (Math.abs(secant[i]! - exact[i]!) > 2e-2 * largest) {
            kinked[i] = Number.POSITIVE_INFINITY; // excluded
            kinks++;
          }
        }
      }
      expect(kinks, kind).toBeLessThanOrEqual(6); // the fixture has 6 such gain entries of 4800, no offset entry
      expect(relativeToCategoryMax(s.sensitivity, exact, exact, 480, 10, kinked), kind).toBeLessThanOrEqual(2e-2);
    }
  });

  it('senseSites on the residual network with step 1e-3 matches autograd within 2e-2 everywhere (fewer kinks crossed)', async () => {
    const f = fixture('residual');
    const s = await sense(join(FIXTURES, 'residual.onnx'), f.site, 'gain', 1e-3);
    expect(relativeToCategoryMax(s.sensitivity, f.gainExact, f.gainExact, 480, 10)).toBeLessThanOrEqual(2e-2);
  });
});

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

  it('senseSites on a quadratic readout gives the exact 2·m², the error estimate h·m², and warns when that exceeds 5%', async () => {
    // y_c = (g_c·m_c)² with m_c the spatial mean of channel c: ∂y_c/∂g_k = 2m_c² δ_kc at g = 1. A central
    // difference is exact for a quadratic; the one-sided ones give m²(2 ± h), so |D₊ − D₋|/2 = h·m², i.e.
    // h/2 of the largest sensitivity: 10% at h = 0.2 (warned), 0.5% at h = 0.01 (not warned).
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
    for (const step of [0.2, 0.01]) {
      const result = await senseSites({ model: quadratic, stimuli: input.npy, site: 'act', step, threads: 1 });
      const s = result.sites[0]!;
      for (let k = 0; k < 2; k++) {
        for (let c = 0; c < 2; c++) {
          const i = k * 2 + c;
          expect(s.sensitivity[i]).toBeCloseTo(k === c ? 2 * m2[c]! : 0, 4);
          expect(s.fdError[i]).toBeCloseTo(k === c ? step * m2[c]! : 0, 4);
        }
      }
      if (step === 0.2) {
        expect(result.warnings).toHaveLength(1);
        expect(result.warnings[0]).toMatch(/site "act": fd_error exceeds 5\.0% of its category's largest \|sensitivity\| for 2 of 4 values/);
      } else expect(result.warnings).toEqual([]);
    }
  });

  it('senseSites results do not depend on how rows are batched (7 rows per run vs 256)', async () => {
    const small = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', kind: 'gain', threads: 1, rowsPerRun: 7 });
    const large = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', kind: 'gain', threads: 1 });
    const a = small.sites[0]!;
    const b = large.sites[0]!;
    expect(a.runs).toBe(Math.ceil(a.rows / 7));
    expect(a.rows + a.skippedRows).toBe(9 * (1 + 2 * 4));
    expect(b.skippedRows).toBe(a.skippedRows);
    let largest = 0;
    for (const v of b.sensitivity) largest = Math.max(largest, Math.abs(v));
    for (let i = 0; i < a.sensitivity.length; i++) {
      expect(Math.abs(a.sensitivity[i]! - b.sensitivity[i]!) / largest).toBeLessThanOrEqual(1e-6);
      expect(Math.abs(a.fdError[i]! - b.fdError[i]!) / largest).toBeLessThanOrEqual(1e-6);
    }
  });

  it('senseSites with secondStep keeps the sensitivities, never lowers fd_error, and doubles the perturbed rows', async () => {
    const one = (await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', threads: 1 })).sites[0]!;
    const two = (await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'relu0', threads: 1, secondStep: true })).sites[0]!;
    expect(two.rows + two.skippedRows).toBe(9 * (1 + 4 * 4));
    expect(two.skippedRows).toBe(2 * one.skippedRows);
    for (let i = 0; i < one.sensitivity.length; i++) {
      expect(two.sensitivity[i]).toBeCloseTo(one.sensitivity[i]!, 10);
      expect(two.fdError[i]!).toBeGreaterThanOrEqual(one.fdError[i]! - 1e-12);
    }
  });

  it('senseSites all-activations measures every ReLU output upstream of the readout and writes one table block per site', async () => {
    const out = join(dir, 'all.arrow');
    const result = await senseSites({ model: residual, from: join(dir, 'base-residual'), site: 'all-activations', threads: 1, out });
    expect(result.sites.map((s) => s.layer)).toEqual(['relu0', 'relu1', 'relu2']);
    const file = readSensitivityTable(out);
    expect(file.blocks.map((b) => [b.layer, b.channels, b.kind, b.step])).toEqual([['relu0', 4, 'gain', 0.01], ['relu1', 4, 'gain', 0.01], ['relu2', 6, 'gain', 0.01]]);
    expect(file.categories).toEqual(['0', '1', '2', '3', '4']); // no sidecar: unit indices as text
    expect(file.metadata['sonde.readout']).toBe('logits');
    // the downstream share falls with depth: fewer multiply-adds remain below a later site
    expect(result.sites[0]!.downstreamShare).toBeGreaterThan(result.sites[1]!.downstreamShare);
    expect(result.sites[1]!.downstreamShare).toBeGreaterThan(result.sites[2]!.downstreamShare);
  });
});
