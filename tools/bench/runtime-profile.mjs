#!/usr/bin/env node
// Where the runtime's hand-over of exposed tensors spends its time: the same calls of one session with
// the default layers exposed, fetching the logits alone and then every exposed tensor, each timed from
// JavaScript, with the process's minor page faults per call and the runtime's own profile of the call
// (onnxruntime `enableProfiling`: the run inside the runtime and its kernels by operator type).
//
//   npm run build && node tools/bench/runtime-profile.mjs /tmp/tv/vgg16.onnx [batch] [calls]
//
// Prints one line per call and, for the last call of each kind, the runtime's figures. The README's
// Performance section ("Where the rest goes") quotes its output for VGG16 and ResNet-50 at batch 8.
import { mkdtempSync, readFileSync, readdirSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import * as ort from 'onnxruntime-node';
import { loadModel } from '../../dist/graph/load-model.js';
import { exposeTensors } from '../../dist/graph/instrument.js';
import { selectLayers } from '../../dist/graph/select.js';
import { inspectModel } from '../../dist/record/inspect-model.js';

const [modelPath, batchText = '8', callsText = '4'] = process.argv.slice(2);
if (!modelPath) {
  process.stderr.write('usage: node tools/bench/runtime-profile.mjs MODEL.onnx [batch] [calls]\n');
  process.exit(2);
}
const batch = Number(batchText);
const calls = Number(callsText);
const model = loadModel(modelPath);
const size = typeof model.input.dims[2] === 'number' ? model.input.dims[2] : 224;
const inspection = await inspectModel(model, { inputShape: [1, 3, size, size] });
const names = selectLayers(inspection.layers, 'default').map((layer) => layer.name);
const logits = model.outputs[0];
const minorFaults = () => Number(readFileSync('/proc/self/stat', 'utf8').split(') ')[1].split(' ')[7]);
const data = new Float32Array(batch * 3 * size * size);
for (let i = 0; i < data.length; i++) data[i] = Math.sin(i * 0.001);

for (const kind of ['logits', 'all exposed']) {
  const folder = mkdtempSync(join(tmpdir(), 'sonde-profile-'));
  try {
    const session = await ort.InferenceSession.create(exposeTensors(model, names), {
      executionProviders: ['cpu'], graphOptimizationLevel: 'all', executionMode: 'sequential', intraOpNumThreads: 2, interOpNumThreads: 1,
      enableProfiling: true, profileFilePrefix: join(folder, 'profile'),
    });
    const fetch = kind === 'logits' ? [logits] : session.outputNames;
    for (let call = 0; call < calls; call++) {
      const faults = minorFaults();
      const start = performance.now();
      const out = await session.run({ [session.inputNames[0]]: new ort.Tensor('float32', data, [batch, 3, size, size]) }, fetch);
      const seconds = (performance.now() - start) / 1000;
      let bytes = 0;
      for (const tensor of Object.values(out)) bytes += tensor.data.byteLength;
      process.stdout.write(`${kind.padEnd(12)} call ${call + 1}: ${seconds.toFixed(3)} s from JavaScript, ${(bytes / 1e6).toFixed(0)} MB handed over, ${minorFaults() - faults} minor page faults\n`);
    }
    session.endProfiling();
    await session.release();
    const file = readdirSync(folder).find((name) => name.endsWith('.json'));
    const events = JSON.parse(readFileSync(join(folder, file), 'utf8'));
    const runs = events.filter((event) => event.name === 'model_run');
    const last = runs.at(-1);
    const byOp = new Map();
    for (const event of events) {
      if (event.cat !== 'Node' || !event.name.endsWith('_kernel_time') || event.ts < last.ts || event.ts > last.ts + last.dur) continue;
      const op = event.args?.op_name ?? '?';
      const entry = byOp.get(op) ?? { count: 0, us: 0 };
      entry.count += 1;
      entry.us += event.dur;
      byOp.set(op, entry);
    }
    const kernels = [...byOp.entries()].sort((a, b) => b[1].us - a[1].us).slice(0, 6).map(([op, e]) => `${op} ×${e.count} ${(e.us / 1e6).toFixed(3)} s`);
    process.stdout.write(`${kind.padEnd(12)} runtime's own run of the last call: ${(last.dur / 1e6).toFixed(3)} s; kernels: ${kernels.join(', ')}\n`);
  } finally {
    rmSync(folder, { recursive: true, force: true });
  }
}
