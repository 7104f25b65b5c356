/**
 * Record against its peer: a hand-written PyTorch forward-hook script (tools/bench/torch_hook_record.py)
 * that saves the same tensors of the same network, over the same stimuli at the same batch and threads,
 * to .npy files, each side a process of its own timed whole (the script loads the network from a saved
 * state dict, as a researcher loads a trained one) and loop against loop (each minus its set-up). Runs
 * where Debian's PyTorch is installed (`/usr/bin/python3` with torch and torchvision;
 * SONDE_BENCH_PYTHON names another interpreter) and says "skipped" otherwise.
 *
 * The tensors are the default layers that are outputs of a module — ReLU, ReLU6 (ONNX Clip), max
 * pooling, linear layers — found from the exporter's node scopes (`/layer1/layer1.0/relu_1/Relu` is the
 * second call of module `layer1.0.relu`); the first rows both sides wrote are compared, so the figures
 * are known to be about the same tensors. Default: the residual reference model (rebuilt by
 * tests/reference/make_fixtures.py), 1024 stimuli at 64 px, batch 8. SONDE_BENCH_PEER_MODEL=/tmp/tv/vgg16.onnx
 * (a network exported by tools/torchvision/export_seeded.py, named after its builder) and
 * SONDE_BENCH_PEER_STIMULI / _BATCH / _REPEATS resize it.
 */
import { execFileSync } from 'node:child_process';
import { closeSync, existsSync, openSync, readFileSync, readSync, rmSync, writeFileSync } from 'node:fs';
import { basename, join } from 'node:path';
import { exposeTensors } from '../graph/instrument.js';
import { loadModel } from '../graph/load-model.js';
import { selectLayers } from '../graph/select.js';
import { withSondeMalloc } from '../malloc-arenas.js';
import { inspectModel } from '../record/inspect-model.js';
import { createNetworkSession, type NetworkSession } from '../session/network-session.js';
import { openSnapshot } from '../snapshot/snapshot.js';
import { benchStimuli, median, REFERENCE_FIXTURES, runInChild, scratch } from './fixtures.js';
import type { BenchResult } from './types.js';

const THREADS = 2;
const PEER_SCRIPT = new URL('../../tools/bench/torch_hook_record.py', import.meta.url).pathname;

/** The module (dotted path) and call index whose output an exported ONNX node computes, from its scope. */
export function moduleOfNode(nodeName: string): { module: string; call: number } | null {
  const scopes = nodeName.split('/').filter((s) => s.length > 0).slice(0, -1);
  if (scopes.length === 0) return null;
  // a scope extends the one before it (features → features.0 → features.0.2) or names a child of the
  // module reached so far (layer1.0 → relu; features.1 → conv → conv.0, qualified within features.1)
  let prefix = '';
  let last = '';
  let call = 0;
  for (const [i, scope] of scopes.entries()) {
    const match = /^(.*?)(?:_(\d+))?$/.exec(scope)!;
    const name = match[1]!;
    if (i === scopes.length - 1) call = match[2] ? Number(match[2]) : 0;
    if (!(last && name.startsWith(`${last}.`))) prefix = last ? `${prefix}${last}.` : prefix;
    last = name;
  }
  return { module: `${prefix}${last}`, call };
}

/** ONNX operators whose output is the output of a module of their own in torchvision networks. */
const MODULE_OPS = new Set(['Relu', 'Clip', 'MaxPool', 'Gemm']);

function findPython(): string | null {
  const python = process.env['SONDE_BENCH_PYTHON'] || '/usr/bin/python3';
  if (!existsSync(python)) return null;
  try {
    execFileSync(python, ['-c', 'import torch, torchvision, numpy'], { stdio: 'ignore', timeout: 120_000 });
    return python;
  } catch {
    return null;
  }
}

/** The first `rows` rows of a float32 .npy file (its header read from the file itself). */
function npyRows(path: string, rows: number, rowLength: number): Float32Array {
  const fd = openSync(path, 'r');
  try {
    const head = Buffer.alloc(10);
    readSync(fd, head, 0, 10, 0);
    const headerLength = head.readUInt16LE(8);
    const out = new Float32Array(rows * rowLength);
    readSync(fd, new Uint8Array(out.buffer), 0, out.byteLength, 10 + headerLength);
    return out;
  } finally {
    closeSync(fd);
  }
}

export async function benchRecordPeer(): Promise<BenchResult> {
  const model = process.env['SONDE_BENCH_PEER_MODEL'] || join(REFERENCE_FIXTURES, 'residual.onnx');
  const kind = basename(model).replace(/\.onnx$/, '');
  const count = Number(process.env['SONDE_BENCH_PEER_STIMULI'] || 1024);
  const batch = Number(process.env['SONDE_BENCH_PEER_BATCH'] || 8);
  const repeats = Number(process.env['SONDE_BENCH_PEER_REPEATS'] || 3);
  const description = `record vs a PyTorch forward-hook script saving the same tensors to .npy, ${kind}, ${count} stimuli, batch ${batch}, ${THREADS} threads`;
  const python = findPython();
  if (!python) return { name: 'record-peer', description, figures: {}, notes: ['skipped: no Python with torch and torchvision (Debian: apt-get install -y python3-torch python3-torchvision; or set SONDE_BENCH_PYTHON)'] };
  const loaded = loadModel(model);
  const size = typeof loaded.input.dims[2] === 'number' ? loaded.input.dims[2] : 224;
  const work = scratch('sonde-bench-peer-');
  try {
    const { path, data: stimuli } = benchStimuli(work.folder, count, size);
    const inspection = await inspectModel(loaded, { inputShape: [1, 3, size, size] });
    const producers = new Map<string, string>();
    for (const node of loaded.proto.graph!.node ?? []) for (const out of node.output ?? []) producers.set(out, node.name ?? '');
    const layers = selectLayers(inspection.layers, 'default').filter((l) => MODULE_OPS.has(l.op) && moduleOfNode(producers.get(l.name) ?? '') !== null);
    const tensors = layers.map((l) => moduleOfNode(producers.get(l.name)!)!);
    const names = layers.map((l) => l.name);
    const weights = join(work.folder, `${kind}.pt`);
    const spec = (out: string, forwardOnly: boolean) => {
      const file = join(work.folder, 'peer.json');
      writeFileSync(file, JSON.stringify({ kind, stimuli: path, batch, threads: THREADS, out, tensors, weights, forward_only: forwardOnly }));
      return file;
    };
    /** The script as a process of its own: its whole wall time, and its loop and set-up as it reports them. */
    const peer = (out: string, forwardOnly = false): { whole: number; seconds: number; setup: number; bytes: number } => {
      const start = performance.now();
      const printed = execFileSync(python, [PEER_SCRIPT, spec(out, forwardOnly)], { maxBuffer: 1 << 20, stdio: ['ignore', 'pipe', 'inherit'] }).toString();
      const whole = (performance.now() - start) / 1000;
      return { whole, ...(JSON.parse(printed.trim().split('\n').pop()!) as { seconds: number; setup: number; bytes: number }) };
    };
    // the two runtimes' bare inference over the same stimuli, batch and threads: what the network costs each
    const per = stimuli.length / count;
    const logits = loaded.outputs[0]!;
    const infer = async (session: NetworkSession, fetch: readonly string[]): Promise<number> => {
      const start = performance.now();
      for (let first = 0; first < count; first += batch) {
        const rows = Math.min(batch, count - first);
        await session.run({ [loaded.input.name]: { data: stimuli.slice(first * per, (first + rows) * per), dims: [rows, 3, size, size] } }, fetch);
      }
      return (performance.now() - start) / 1000;
    };
    let run = 0;
    /**
     * `record` as a process of its own, the way the script runs (with the malloc settings bin/sonde gives
     * every command): its whole wall time, and its set-up (until the runtime session is ready) and
     * in-process time as recordSnapshot reports them.
     */
    const record = (keep: boolean): { whole: number; seconds: number; setup: number; bytes: number; folder: string } => {
      const out = join(work.folder, `snap${run++}`);
      const child = runInChild(`const { recordSnapshot } = await import(dist + 'record/record-snapshot.js');
const s = await recordSnapshot(${JSON.stringify({ model, stimuli: path, out, layerNames: names, batch, threads: THREADS })});
return JSON.stringify({ seconds: s.wallSeconds, setup: s.setupSeconds, bytes: s.bytesWritten });`, withSondeMalloc());
      if (!keep) rmSync(out, { recursive: true, force: true });
      return { whole: child.wallSeconds, ...(JSON.parse(child.detail) as { seconds: number; setup: number; bytes: number }), folder: out };
    };
    // one pair kept to check that both sides wrote the same tensors (first rows of every tensor)
    const checkRows = Math.min(batch, count);
    const kept = record(true);
    const peerOut = join(work.folder, 'peer-check');
    peer(peerOut);
    const snapshot = openSnapshot(kept.folder);
    let worst = 0;
    for (const [i, layer] of layers.entries()) {
      const theirs = npyRows(join(peerOut, `${String(i).padStart(3, '0')}.npy`), checkRows, layer.elements);
      const ours = new Float32Array(checkRows * layer.elements);
      let filled = 0;
      for await (const part of snapshot.readLayer(layer.name)) {
        const take = Math.min(part.activation!.length, ours.length - filled);
        ours.set(part.activation!.subarray(0, take), filled);
        filled += take;
        if (filled === ours.length) break;
      }
      let scale = 0;
      for (let k = 0; k < ours.length; k++) scale = Math.max(scale, Math.abs(theirs[k]!));
      for (let k = 0; k < ours.length; k++) worst = Math.max(worst, Math.abs(ours[k]! - theirs[k]!) / (scale || 1));
    }
    rmSync(kept.folder, { recursive: true, force: true });
    rmSync(peerOut, { recursive: true, force: true });
    const ours: number[] = [];
    const oursLoop: number[] = [];
    const oursSetup: number[] = [];
    const theirs: number[] = [];
    const theirsLoop: number[] = [];
    const theirsSetup: number[] = [];
    const bare: number[] = [];
    const fetched: number[] = [];
    const forward: number[] = [];
    let bytes = 0;
    let peerBytes = 0;
    const bareSession = await createNetworkSession(readFileSync(model), { threads: THREADS, spinning: false });
    const exposedSession = await createNetworkSession(exposeTensors(loaded, names), { threads: THREADS, spinning: false });
    try {
      await infer(bareSession, [logits]); // warm-up
      for (let r = 0; r < repeats; r++) {
        const a = record(false);
        ours.push(a.whole);
        oursLoop.push(a.seconds - a.setup);
        oursSetup.push(a.whole - (a.seconds - a.setup));
        bytes = a.bytes;
        const out = join(work.folder, `peer${r}`);
        const b = peer(out);
        rmSync(out, { recursive: true, force: true });
        theirs.push(b.whole);
        theirsLoop.push(b.seconds);
        theirsSetup.push(b.whole - b.seconds);
        peerBytes = b.bytes;
        bare.push(await infer(bareSession, [logits]));
        fetched.push(await infer(exposedSession, names));
        forward.push(peer(join(work.folder, 'forward'), true).seconds);
      }
    } finally {
      await bareSession.close();
      await exposedSession.close();
    }
    return {
      name: 'record-peer',
      description: `${description}, median of ${repeats}`,
      figures: {
        'tensors recorded (default layers that are module outputs)': layers.length,
        'record, whole process s': median(ours),
        'PyTorch hooks to .npy, whole process s': median(theirs),
        'record / PyTorch hooks (whole processes)': median(ours) / median(theirs),
        'record set-up s (process start until the runtime session is ready)': median(oursSetup),
        'PyTorch set-up s (process start, imports, building and loading the network)': median(theirsSetup),
        'record loop s (after the set-up)': median(oursLoop),
        'PyTorch loop s (forward passes with hooks, .npy writes, fsync)': median(theirsLoop),
        'record / PyTorch hooks, loops alone': median(oursLoop) / median(theirsLoop),
        'onnxruntime bare inference s': median(bare),
        'PyTorch forward passes alone s': median(forward),
        'onnxruntime / PyTorch, bare inference': median(bare) / median(forward),
        'onnxruntime with the same tensors exposed and fetched s': median(fetched),
        'record loop / onnxruntime with the tensors exposed and fetched': median(oursLoop) / median(fetched),
        'onnxruntime with the tensors exposed and fetched / PyTorch loop (above 0.7: the loop target cannot be met through onnxruntime-node here)': median(fetched) / median(theirsLoop),
        'record written MB': bytes / 1e6,
        'PyTorch hooks written MB': peerBytes / 1e6,
        'largest difference of the first rows, relative to the tensor maximum': worst,
      },
      targets: { 'record / PyTorch hooks (whole processes)': '<= 0.7' },
      notes: [
        'both sides as processes of their own, whole: record (Node.js start, model loading and hashing, inspection, session creation, stimulus reading and hashing, channel means, Arrow files, SHA-256, fsync) against the script (Python start, importing torch, building the network and loading its saved state dict, the loop with hooks, .npy writes, fsync); loops alone: each minus its set-up',
        'bare inference: the same stimuli, batch and threads through each runtime with nothing recorded (onnxruntime fetching the logits; PyTorch\'s loop without hooks); exposed and fetched: onnxruntime handing over the recorded tensors, nothing else done with them',
      ],
    };
  } finally {
    work.dispose();
  }
}
