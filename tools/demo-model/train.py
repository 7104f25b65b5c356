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


class GlyphNet(nn.Module):
    def __init__(self, kinds):
        super().__init__()
        self.stages = nn.ModuleList()
        for cin, cout, stride, pool in STAGES:
            layers = [nn.Conv2d(cin, cout, 3, stride=stride, padding=1), nn.ReLU()]
            if pool:
                layers.append(nn.MaxPool2d(2))
            self.stages.append(nn.Sequential(*layers))
        self.classifier = nn.Linear(STAGES[-1][1], kinds)

    def forward(self, x):
        for stage in self.stages:
            x = stage(x)
        x = x.mean(dim=(2, 3))
        return self.classifier(x)


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
    parser.add_argument("--eval", nargs="*", default=[])
    args = parser.parse_args()

    torch.set_num_threads(args.threads)
    torch.manual_seed(args.seed)
    started = time.time()
    description, kinds, pixels, targets = load_set(args.data)
    print(f"data: {len(pixels)} displays, kinds {kinds}, per-kind prevalence {targets.mean(0).numpy().round(3)}", flush=True)

    model = GlyphNet(len(kinds))
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
    data_description = {k: description[k] for k in description if k != "format"}
    training = {
        "seed": args.seed,
        "command": " ".join(["/usr/bin/python3", "tools/demo-model/train.py"] + sys.argv[1:]),
        "data": data_description,
        "epochs": args.epochs,
        "batch": args.batch,
        "learningRate": args.lr,
        "threads": args.threads,
        "wallSeconds": round(wall, 1),
        "lossPerEpoch": history,
        "torch": torch.__version__,
    }
    with open(os.path.join(args.out, "training.json"), "w") as f:
        json.dump(training, f, indent=2)
        f.write("\n")
    print(f"wrote {onnx_path} ({os.path.getsize(onnx_path)} bytes) in {wall:.0f} s")


if __name__ == "__main__":
    main()
