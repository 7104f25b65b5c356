import { describe, expect, it } from 'vitest';
import { moduleOfNode } from '../../src/bench/record-peer.js';

// Node names as torch.onnx.export (PyTorch 1.13) writes them for torchvision networks: each scope is a
// module, either by its qualified name (features.0.2) or by its attribute name under the enclosing
// module (relu under layer1.0), with _k for the k-th call of a module used more than once.
describe('moduleOfNode', () => {
  it('moduleOfNode(name) gives the module path and call index of exported node scopes', () => {
    expect(moduleOfNode('/features/features.0/features.0.2/Clip')).toEqual({ module: 'features.0.2', call: 0 });
    expect(moduleOfNode('/features/features.1/Relu')).toEqual({ module: 'features.1', call: 0 });
    expect(moduleOfNode('/layer1/layer1.0/relu/Relu')).toEqual({ module: 'layer1.0.relu', call: 0 });
    expect(moduleOfNode('/layer1/layer1.0/relu_2/Relu')).toEqual({ module: 'layer1.0.relu', call: 2 });
    expect(moduleOfNode('/maxpool/MaxPool')).toEqual({ module: 'maxpool', call: 0 });
    expect(moduleOfNode('/classifier/classifier.6/Gemm')).toEqual({ module: 'classifier.6', call: 0 });
    expect(moduleOfNode('/features/features.1/conv/conv.0/conv.0.2/Clip')).toEqual({ module: 'features.1.conv.0.2', call: 0 });
    expect(moduleOfNode('/GlobalAveragePool')).toBeNull();
  });
});
