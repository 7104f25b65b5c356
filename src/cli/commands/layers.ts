import Table from 'cli-table3';
import type { Command } from 'commander';
import { describeLayout } from '../../graph/layout.js';
import { describeSkipped, describeSkippedTensor, inspectModel } from '../../record/inspect-model.js';
import { parseShape } from '../../stimuli/preprocess.js';
import { megabytes } from '../options.js';
import { cliIo } from '../io.js';

/** `sonde layers MODEL`: every recordable tensor with depth, op, shape, layout, size, default selection; `--skipped` the rest, one per line with the reason. */
export function registerLayers(program: Command): void {
  program
    .command('layers')
    .description('list the recordable tensors of an ONNX model, in topological order, with their layouts')
    .argument('<model>', 'ONNX model file')
    .option('--input-shape <NxCxHxW>', 'input shape for models with dynamic spatial axes, e.g. 1x3x224x224')
    .option('--skipped', 'list the tensors that are not recorded, one per line with the reason')
    .option('--json', 'print JSON instead of a table (with every skipped tensor and its reason)')
    .action(async (modelPath: string, opts: { inputShape?: string; json?: boolean; skipped?: boolean }) => {
      const inspection = await inspectModel(modelPath, opts.inputShape ? { inputShape: parseShape(opts.inputShape) } : {});
      const io = cliIo();
      if (opts.json) {
        const json = {
          model: inspection.model.fileName,
          input: { name: inspection.input.name, shape: inspection.input.shape },
          layers: inspection.layers.map((l) => ({ name: l.name, op: l.op, depth: l.depth, shape: l.shape, elements: l.elements, default: l.default, layout: l.layout })),
          skipped: inspection.skippedTensors,
        };
        io.stdout(`${JSON.stringify(json, null, 2)}\n`);
        return;
      }
      if (opts.skipped) {
        for (const t of inspection.skippedTensors) io.stdout(`${describeSkippedTensor(t)}\n`);
        io.stdout(`${inspection.skippedTensors.length} tensors skipped; ${inspection.layers.length} recordable\n`);
        return;
      }
      const table = new Table({ head: ['depth', 'tensor', 'op', 'layout', 'elements', 'default'], style: { head: [], border: [], compact: true } });
      for (const l of inspection.layers) table.push([l.depth, l.name, l.op, `${describeLayout(l.shape, l.layout)}${l.layout.source === 'sidecar' ? ', sidecar' : ''}`, l.elements, l.default ? 'yes' : '']);
      io.stdout(`${table.toString()}\n`);
      const defaults = inspection.layers.filter((l) => l.default);
      const bytes = (list: typeof defaults) => list.reduce((s, l) => s + l.elements * 4, 0);
      io.stdout(
        `${inspection.layers.length} recordable tensors (${defaults.length} by default); activations per stimulus: ${megabytes(bytes(defaults))} default, ${megabytes(bytes(inspection.layers))} all; ${inspection.model.parameterCount.toLocaleString('en-US')} parameters; data input "${inspection.input.name}", shape [${inspection.input.shape.join(', ')}]\n`,
      );
      const skipped = describeSkipped(inspection, modelPath);
      if (skipped) io.stdout(`${skipped}\n`);
    });
}
