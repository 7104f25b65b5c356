"""The peer of `npm run bench -- record-peer`: a hand-written PyTorch forward-hook recorder.

It runs the same network as the ONNX model Sonde records (rebuilt from the same seeded code), over the
same stimuli (.npy), at the same batch size and thread count, and saves the same tensors — the outputs
of the modules the bench names — to one .npy file per tensor, written batch by batch and fsynced at the
end, the way a researcher would script it. The network is built the way a researcher loads a trained one:
the torchvision builder, then `load_state_dict` from a saved file ("weights"; written from the seeded
network, untimed, when it does not exist yet). It prints one JSON line: the seconds of the loop
(stimulus reading, forward passes, saving, fsync), the seconds before it (imports, building and loading
the network) and the bytes written; the bench times the whole process besides.

Usage (Debian's PyTorch): /usr/bin/python3 tools/bench/torch_hook_record.py SPEC.json
SPEC: {"kind": "residual" | a torchvision builder name (vgg16, resnet50, …), "stimuli": path, "batch": n,
       "threads": n, "out": folder, "tensors": [{"module": "features.0.2", "call": 0}, …],
       "weights": path of a state dict (.pt),
       "forward_only": false}   (true: time the forward passes alone, no hooks, nothing saved)
"""
import time

STARTED = time.perf_counter()  # before the imports: they are part of what the script costs

import json  # noqa: E402
import os  # noqa: E402
import sys  # noqa: E402

import numpy as np  # noqa: E402
import torch  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))


def build(kind: str) -> torch.nn.Module:
    if kind == 'residual':
        sys.path.insert(0, os.path.join(ROOT, 'tests', 'reference'))
        import make_fixtures  # the committed reference models are built here
        return make_fixtures.BUILDERS['residual']()
    sys.path.insert(0, os.path.join(ROOT, 'tools', 'torchvision'))
    import export_seeded  # seeded torchvision networks, as exported for the real-size checks
    return export_seeded.build(kind)


def main() -> None:
    with open(sys.argv[1]) as f:
        spec = json.load(f)
    torch.set_num_threads(int(spec['threads']))
    weights = spec['weights']
    saved = not os.path.exists(weights)
    if saved:  # once, in the bench's untimed check run
        torch.save(build(spec['kind']).state_dict(), weights)
    model = build(spec['kind'])
    model.load_state_dict(torch.load(weights))
    model.eval()
    modules = dict(model.named_modules())
    x = np.load(spec['stimuli'], mmap_mode='r')
    count = x.shape[0]
    wanted = {}  # module path -> {call index: tensor index}
    for i, t in enumerate(spec['tensors']):
        if t['module'] not in modules:
            sys.exit(f"no module {t['module']!r} in {spec['kind']}")
        wanted.setdefault(t['module'], {})[int(t['call'])] = i
    batch = int(spec['batch'])
    if spec.get('forward_only'):
        # the same loop without hooks or saving: what the network alone costs PyTorch here
        start = time.perf_counter()
        with torch.no_grad():
            for first in range(0, count, batch):
                model(torch.from_numpy(np.array(x[first:first + batch], dtype=np.float32)))
        print(json.dumps({'seconds': time.perf_counter() - start, 'setup': start - STARTED, 'bytes': 0, 'tensors': 0}))
        return
    os.makedirs(spec['out'], exist_ok=True)
    files = [open(os.path.join(spec['out'], f'{i:03d}.npy'), 'wb') for i in range(len(spec['tensors']))]
    started = [False] * len(files)
    calls = {}
    written = [0]

    def hook_for(path):
        def hook(_module, _inputs, output):
            k = calls.get(path, 0)
            calls[path] = k + 1
            i = wanted[path].get(k)
            if i is None:
                return
            array = output.detach().numpy()
            if not started[i]:
                header = {'descr': '<f4', 'fortran_order': False, 'shape': (count,) + array.shape[1:]}
                np.lib.format.write_array_header_1_0(files[i], header)
                started[i] = True
            array.tofile(files[i])
            written[0] += array.nbytes
        return hook

    for path in wanted:
        modules[path].register_forward_hook(hook_for(path))
    start = time.perf_counter()
    with torch.no_grad():
        for first in range(0, count, batch):
            calls.clear()
            model(torch.from_numpy(np.array(x[first:first + batch], dtype=np.float32)))
    for f in files:
        f.flush()
        os.fsync(f.fileno())
        f.close()
    seconds = time.perf_counter() - start
    print(json.dumps({'seconds': seconds, 'setup': start - STARTED, 'bytes': written[0], 'tensors': len(files), 'saved_weights': saved}))


if __name__ == '__main__':
    main()
