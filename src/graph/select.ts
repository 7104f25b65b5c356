import { closestHint, UsageError } from '../errors.js';

/** What the selector needs to know of each recordable tensor. */
export interface SelectableLayer {
  name: string;
  op: string;
  /** Whether the default selector records it. */
  default: boolean;
}

/** Activation functions (ONNX operator names). */
export const ACTIVATION_OPS: ReadonlySet<string> = new Set([
  'Relu', 'LeakyRelu', 'PRelu', 'Elu', 'Selu', 'Celu', 'Sigmoid', 'HardSigmoid', 'HardSwish', 'Tanh',
  'Softmax', 'LogSoftmax', 'Softplus', 'Softsign', 'Gelu', 'Mish', 'Clip', 'ThresholdedRelu',
]);
/** Pooling operators. */
export const POOLING_OPS: ReadonlySet<string> = new Set([
  'MaxPool', 'AveragePool', 'GlobalAveragePool', 'GlobalMaxPool', 'LpPool', 'GlobalLpPool',
]);
/** Operators that merge activation paths when at least two of their inputs are activations. */
export const MERGE_OPS: ReadonlySet<string> = new Set(['Add', 'Sum', 'Concat', 'Mul']);
/** Linear readouts. */
export const LINEAR_OPS: ReadonlySet<string> = new Set(['Gemm', 'MatMul']);

/**
 * Resolves a layer selector to tensor names (in the order of `layers`). Grammar: terms joined by `+`
 * (or whitespace); a term is `default`, `all`, `op:A,B` (operator types), a glob with `*`/`?`, or an
 * exact tensor name. The result is the union of the terms.
 * @throws UsageError naming the term when a name, glob or operator matches nothing (with close matches).
 */
export function selectLayers<T extends SelectableLayer>(layers: readonly T[], selector: string | undefined): T[] {
  const text = (selector ?? 'default').trim();
  if (text.length === 0) throw new UsageError('E_SELECTOR', '--layers is empty', { hint: 'use "default", "all", "op:Relu" or tensor names' });
  const terms = text.split(/\s*\+\s*|\s+/).filter((t) => t.length > 0);
  const chosen = new Set<string>();
  const names = layers.map((l) => l.name);
  for (const term of terms) {
    let matched: T[];
    if (term === 'all') matched = layers.slice();
    else if (term === 'default') matched = layers.filter((l) => l.default);
    else if (term.startsWith('op:')) {
      const ops = term.slice(3).split(',').map((o) => o.trim()).filter((o) => o.length > 0);
      if (ops.length === 0) throw new UsageError('E_SELECTOR', `--layers term "${term}" names no operator`, { hint: 'e.g. op:Conv,Relu' });
      const present = [...new Set(layers.map((l) => l.op))];
      for (const op of ops) {
        if (!present.includes(op)) {
          throw new UsageError('E_SELECTOR', `--layers: no recordable tensor is produced by operator "${op}"`, { hint: closestHint(op, present) || undefined });
        }
      }
      matched = layers.filter((l) => ops.includes(l.op));
    } else if (/[*?]/.test(term)) {
      const pattern = globToRegExp(term);
      matched = layers.filter((l) => pattern.test(l.name));
      if (matched.length === 0) {
        throw new UsageError('E_SELECTOR', `--layers: pattern "${term}" matches no recordable tensor`, { hint: closestHint(term.replace(/[*?]/g, ''), names) || undefined });
      }
    } else {
      matched = layers.filter((l) => l.name === term);
      if (matched.length === 0 && term.includes(',') && term.split(',').every((part) => names.includes(part.trim()))) {
        throw new UsageError('E_SELECTOR', `--layers "${term}": several tensors are joined with +, not commas`, { hint: `write --layers '${term.split(',').map((p) => p.trim()).join('+')}'` });
      }
      if (matched.length === 0) {
        throw new UsageError('E_SELECTOR', `--layers: tensor "${term}" not found (model has ${layers.length} recordable tensors)`, {
          hint: closestHint(term, names) || undefined,
        });
      }
    }
    for (const l of matched) chosen.add(l.name);
  }
  return layers.filter((l) => chosen.has(l.name));
}

/** Converts a glob (`*` any run, `?` one character) into an anchored regular expression. */
export function globToRegExp(glob: string): RegExp {
  const escaped = glob.replace(/[.+^${}()|[\]\\]/g, '\\$&').replace(/\*/g, '.*').replace(/\?/g, '.');
  return new RegExp(`^${escaped}$`);
}
