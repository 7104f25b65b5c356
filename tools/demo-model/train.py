#!/usr/bin/python3
"""Train the demo glyph network on displays written by `sonde stimuli make --format npy`, export it to ONNX.

The network ("glyphnet") is a small CNN: seven 3x3 convolutions with ReLU, three 2x2 max-poolings,
global average pooling and one linear layer with one logit per glyph kind (multi-label, trained with
binary cross-entropy on logits). No BatchNorm. It takes raw [0, 1] RGB (no mean/std normalisation).

Usage (from the repository root; Debian's python3-torch and python3-onnx):
    /usr/bin/python3 tools/demo-model/train.py --data DATA_DIR --out models/demo [--epochs N] [--seed S]
        [--eval CUED_DIR ...]

DATA_DIR holds stimuli.npy ([N, 3, 64, 64] float32) and labels.csv (one `label` column, kinds joined
with ';'), as the TypeScript generator writes them; the kinds and their order come from its set.json.
Each --eval folder is a cued set (npy layout); its accuracy of the rule "cued logit > 0" is printed
after training, for calibration only (the committed baseline is computed in TypeScript).
Writes OUT/glyphnet.onnx and OUT/training.json (seed, command, data description, epochs, wall time, loss).
"""
import argparse
import json
import os
import sys
import time
from collections import OrderedDict

import numpy as np
import torch
from torch import nn

STAGES = [  # (in channels, out channels, stride, max-pool after); 3x3 kernels, padding 1
    (3, 16, 2, False),  # 64 -> 32: a strided first layer keeps training on 2 cores fast
    (16, 32, 1, True),  # -> 16
    (32, 32, 1, False),
    (32, 48, 1, True),  # -> 8
    (48, 64, 1, False),
    (64, 64, 1, False),
    (64, 64, 1, False),
]


INPUT_CENTRE = 0.5  # the graph maps raw [0, 1] pixels to (x - 0.5) / 0.25 itself
INPUT_SCALE = 0.25


class GlyphNet(nn.Module):
    """Conv (+ BatchNorm while training) + ReLU stages, global average pooling, linear readout."""

    def __init__(self, kinds, batchnorm):
        super().__init__()
        self.stages = []
        for number, (cin, cout, stride, pool) in enumerate(STAGES, start=1):
            layers = OrderedDict(conv=nn.Conv2d(cin, cout, 3, stride=stride, padding=1))
            if batchnorm:
                layers["norm"] = nn.BatchNorm2d(cout)
            layers["relu"] = nn.ReLU()
            if pool:
                layers["pool"] = nn.MaxPool2d(2)
            stage = nn.Sequential(layers)
            self.add_module(f"conv{number}", stage)  # ONNX tensor names follow: /conv3/relu/Relu_output_0
            self.stages.append(stage)
        self.readout = nn.Linear(STAGES[-1][1], kinds)

    def forward(self, x):
        x = (x - INPUT_CENTRE) / INPUT_SCALE
        for stage in self.stages:
            x = stage(x)
        x = x.mean(dim=(2, 3))
        return self.readout(x)


def fold_batchnorm(trained, kinds):
    """A BatchNorm-free copy of `trained` (eval mode): each BN is folded into the convolution before it,
    w' = w * g / sqrt(v + eps), b' = (b - m) * g / sqrt(v + eps) + beta."""
    folded = GlyphNet(kinds, batchnorm=False)
    with torch.no_grad():
        for source, target in zip(trained.stages, folded.stages):
            if not hasattr(source, "norm"):
                target.conv.load_state_dict(source.conv.state_dict())
                continue
            norm = source.norm
            scale = norm.weight / torch.sqrt(norm.running_var + norm.eps)
            target.conv.weight.copy_(source.conv.weight * scale[:, None, None, None])
            target.conv.bias.copy_((source.conv.bias - norm.running_mean) * scale + norm.bias)
        folded.readout.load_state_dict(trained.readout.state_dict())
    return folded.eval()


def load_set(folder, kinds=None):
    with open(os.path.join(folder, "set.json")) as f:
        description = json.load(f)
    kinds = kinds or description["kinds"]
    images = np.load(os.path.join(folder, "stimuli.npy"), mmap_mode="r")
    with open(os.path.join(folder, "labels.csv")) as f:
        lines = f.read().splitlines()
    if lines[0] != "label":
        sys.exit(f"{folder}/labels.csv: expected a 'label' header (npy layout), got {lines[0]!r}")
    rows = lines[1:]
    if len(rows) != images.shape[0]:
        sys.exit(f"{folder}: {images.shape[0]} images but {len(rows)} labels")
    targets = np.zeros((len(rows), len(kinds)), dtype=np.float32)
    for i, row in enumerate(rows):
        for kind in filter(None, row.split(";")):
            targets[i, kinds.index(kind)] = 1
    # keep the pixels as uint8 in memory (they are k/255 by construction): 4x less memory than float32
    pixels = np.empty(images.shape, dtype=np.uint8)
    for start in range(0, images.shape[0], 1024):
        pixels[start:start + 1024] = np.rint(images[start:start + 1024] * 255)
    return description, kinds, torch.from_numpy(pixels), torch.from_numpy(targets)


def cued_accuracy(model, folder, kinds):
    description, _, pixels, targets = load_set(folder, kinds)
    cue = kinds.index(description["cued"])
    with torch.no_grad():
        logits = torch.cat([model(pixels[i:i + 256].float() / 255) for i in range(0, len(pixels), 256)])
    present = targets[:, cue] > 0.5
    said = logits[:, cue] > 0
    hits = (said & present).sum().item() / present.sum().item()
    false_alarms = (said & ~present).sum().item() / (~present).sum().item()
    accuracy = (said == present).float().mean().item()
    return description["cued"], hits, false_alarms, accuracy


def main():
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--data", required=True)
    parser.add_argument("--out", required=True)
    parser.add_argument("--epochs", type=int, default=12)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--batch", type=int, default=64)
    parser.add_argument("--lr", type=float, default=2e-3)
    parser.add_argument("--threads", type=int, default=2)
    parser.add_argument("--constant-lr", action="store_true")
    parser.add_argument("--no-batchnorm", action="store_true")
    parser.add_argument("--eval", nargs="*", default=[])
    args = parser.parse_args()

    torch.set_num_threads(args.threads)
    torch.manual_seed(args.seed)
    started = time.time()
    description, kinds, pixels, targets = load_set(args.data)
    print(f"data: {len(pixels)} displays, kinds {kinds}, per-kind prevalence {targets.mean(0).numpy().round(3)}", flush=True)

    model = GlyphNet(len(kinds), batchnorm=not args.no_batchnorm)
    optimiser = torch.optim.Adam(model.parameters(), lr=args.lr)
    steps_per_epoch = (len(pixels) + args.batch - 1) // args.batch
    if args.constant_lr:
        schedule = torch.optim.lr_scheduler.LambdaLR(optimiser, lambda step: 1.0)
    else:
        schedule = torch.optim.lr_scheduler.OneCycleLR(optimiser, max_lr=args.lr, total_steps=args.epochs * steps_per_epoch, pct_start=0.15)
    loss_fn = nn.BCEWithLogitsLoss()
    generator = torch.Generator().manual_seed(args.seed)
    history = []
    for epoch in range(args.epochs):
        model.train()
        order = torch.randperm(len(pixels), generator=generator)
        total, seen = 0.0, 0
        for start in range(0, len(pixels), args.batch):
            index = order[start:start + args.batch]
            x = pixels[index].float() / 255
            y = targets[index]
            optimiser.zero_grad()
            loss = loss_fn(model(x), y)
            loss.backward()
            optimiser.step()
            schedule.step()
            total += loss.item() * len(index)
            seen += len(index)
        history.append(round(total / seen, 5))
        model.eval()
        report = ""
        if args.eval:
            results = [cued_accuracy(model, folder, kinds) for folder in args.eval]
            report = f"  cued accuracy {np.mean([r[3] for r in results]):.3f}"
        print(f"epoch {epoch + 1}/{args.epochs}: loss {history[-1]:.4f}{report}  ({time.time() - started:.0f} s)", flush=True)

    wall = time.time() - started
    model.eval()
    trained = model
    model = fold_batchnorm(trained, len(kinds))
    with torch.no_grad():
        probe = pixels[:256].float() / 255
        gap = (model(probe) - trained(probe)).abs().max().item()
    print(f"folded BatchNorm into the convolutions: max |logit difference| on 256 displays = {gap:.2e}")
    if gap > 1e-3:
        sys.exit("BatchNorm folding changed the logits; not exporting")
    for folder in args.eval:
        kind, h, f, acc = cued_accuracy(model, folder, kinds)
        print(f"  {kind:9s} H {h:.3f}  F {f:.3f}  accuracy {acc:.3f}")

    os.makedirs(args.out, exist_ok=True)
    onnx_path = os.path.join(args.out, "glyphnet.onnx")
    torch.onnx.export(
        model,
        torch.zeros(1, 3, 64, 64),
        onnx_path,
        opset_version=13,
        input_names=["input"],
        output_names=["logits"],
        dynamic_axes={"input": {0: "batch"}, "logits": {0: "batch"}},
        do_constant_folding=True,
    )
    data_command = (
        f"./bin/sonde stimuli make --out {args.data} --count {description['count']} --seed {description['seed']}"
        f" --clutter {description['clutter']} --noise {description['noise']} --format npy"
    )
    sidecar = {
        "input": {"name": "input", "shape": ["batch", 3, 64, 64], "dtype": "float32"},
        "preprocessing": {"size": [64, 64], "scale": "0-1", "mean": [0.0, 0.0, 0.0], "std": [1.0, 1.0, 1.0]},
        "outputs": {"name": "logits", "kinds": kinds},
        "layers": describe_layers(onnx_path),
        "notes": "RGB in [0, 1] (no mean/std to apply: the graph computes (x - 0.5) / 0.25 itself). "
        "BatchNorm was used in training and is folded into the convolutions. Multi-label: one logit per kind, "
        "sigmoid > 0.5 (logit > 0) means present.",
        "training": {
            "seed": args.seed,
            "command": " ".join(["/usr/bin/python3", "tools/demo-model/train.py"] + sys.argv[1:]),
            "dataCommand": data_command,
            "dataSeed": description["seed"],
            "data": {k: description[k] for k in description if k != "format"},
            "epochs": args.epochs,
            "batch": args.batch,
            "learningRate": args.lr,
            "threads": args.threads,
            "wallSeconds": round(wall, 1),
            "lossPerEpoch": history,
            "torch": torch.__version__,
        },
    }
    with open(os.path.join(args.out, "glyphnet.json"), "w") as f:
        json.dump(sidecar, f, indent=2)
        f.write("\n")
    if args.eval:
        write_reference(model, args.eval[0], kinds, os.path.join(args.out, "reference-logits.json"))
    print(f"wrote {onnx_path} ({os.path.getsize(onnx_path)} bytes) and glyphnet.json; training took {wall:.0f} s")


OPTION_FIELDS = ["seed", "count", "kinds", "clutter", "noise", "contrast", "glyphRadius", "maxGlyphs", "cued"]


def write_reference(model, folder, kinds, path, count=8):
    """Logits of the exported (folded, eval-mode) PyTorch model on the first `count` displays of `folder`,
    with the generator options that rebuild those displays; the ONNX runtime test compares against them."""
    description, _, pixels, _ = load_set(folder, kinds)
    with torch.no_grad():
        logits = model(pixels[:count].float() / 255)
    reference = {
        "source": "PyTorch " + torch.__version__ + ", tools/demo-model/train.py, BatchNorm folded, eval mode",
        "set": {k: description[k] for k in OPTION_FIELDS},
        "indices": list(range(count)),
        "logits": [[round(float(v), 6) for v in row] for row in logits],
    }
    with open(path, "w") as f:
        json.dump(reference, f, indent=1)
        f.write("\n")


def describe_layers(onnx_path):
    """The tensors worth recording, read from the exported graph: each conv stage's ReLU output, the max-pool
    outputs, the global average pool and the logits, with a short stage label and the per-display shape."""
    import onnx

    model = onnx.shape_inference.infer_shapes(onnx.load(onnx_path))
    shapes = {}
    for info in list(model.graph.value_info) + list(model.graph.output):
        dims = [d.dim_value if d.HasField("dim_value") else d.dim_param for d in info.type.tensor_type.shape.dim]
        shapes[info.name] = dims[1:]
    layers = []
    stage = 0
    for node in model.graph.node:
        name = node.output[0]
        if node.op_type == "Relu":
            stage += 1
            label = f"conv{stage}"
        elif node.op_type == "MaxPool":
            label = f"pool{stage}"
        elif node.op_type == "ReduceMean":
            label = "global-pool"
        elif node.op_type == "Gemm":
            label = "logits"
        else:
            continue
        layers.append({"name": name, "stage": label, "shape": shapes.get(name)})
    return layers


if __name__ == "__main__":
    main()
