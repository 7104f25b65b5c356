"""Writes PyTorch forward-hook references for tensor layouts and the transformer default selection.

Run from the repository root with the Debian interpreter that has torch:

    /usr/bin/python3 tests/reference/make_layout_fixtures.py

1. fixtures/attention/hooks/: the small seeded torchvision VisionTransformer of make_gradient_fixtures.py
   (rebuilt by make_token_fixtures.build(), same weights as the committed vit-opset14/17.onnx), run on
   the committed float32 inputs (fixtures/attention/inputs.npy) with forward hooks on every block
   (`encoder.layers.encoder_layer_i`: the residual stream after the block), its MLP activation
   (`…mlp.1`, nn.GELU) and its attention (`…self_attention`, output [0]: after the output projection):

       <slug>.npy        float32 [2, 17, D]  the module's output
       <slug>_means.npy  float64 [2, D]      its mean over the 17 tokens (NumPy), per feature
       index-opset<k>.json  [{module, onnx, slug, role}]: the ONNX tensor leaving the module's scope
                            (make_fixtures.onnx_output_of), per exported opset

2. fixtures/layouts/: two small seeded networks exported at opset 14, each with its inputs and hooks:
   - channels-last.onnx: Conv → permute to [N, H, W, C] → Linear over C → ReLU → mean over H, W →
     Linear (a channels-last stretch as graphs from other frameworks have it);
     relu.npy [2, 6, 6, 5] and relu_means.npy [2, 5] (mean over H and W).
   - attention-batch-first.onnx: patch embedding, then one attention written batch first
     ([N, H, T, d] queries, [N, H, T, T] softmax as an nn.Softmax module), output projection, residual,
     LayerNorm, token mean, Linear; softmax.npy [2, 2, 16, 16] and softmax_means.npy [2, 2] (mean over
     T × T per head: exactly 1/T, since every row of a softmax sums to 1).
   - mlp-gelu-tanh.onnx: patch embedding, then an MLP block with nn.GELU(approximate="tanh") (written out
     with Tanh, Pow, Mul and Add at opset 14) and a residual; no values, only the ONNX name of the GELU's
     output for the default selection.
   index.json names the ONNX tensor of each hooked module.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import torch
import torch.nn as nn

sys.path.insert(0, str(Path(__file__).resolve().parent))
import make_fixtures as mf  # noqa: E402
import make_token_fixtures as mt  # noqa: E402

torch.set_num_threads(1)

LAYOUT_SEED = 4242


def hooked(model: nn.Module, x: torch.Tensor, paths: list[str]) -> dict[str, np.ndarray]:
    """model(x) with a forward hook on each path; the module's output (its first element when it returns a tuple)."""
    seen: dict[str, list[np.ndarray]] = {p: [] for p in paths}
    handles = []
    for p in paths:
        def hook(_m, _i, output, p=p):
            tensor = output[0] if isinstance(output, tuple) else output
            seen[p].append(tensor.detach().numpy().copy())
        handles.append(mf.get_module(model, p).register_forward_hook(hook))
    try:
        model(x)  # autograd on, as for the export (torchvision's attention would take its fused path under no_grad)
    finally:
        for h in handles:
            h.remove()
    for p, outs in seen.items():
        if len(outs) != 1:
            raise RuntimeError(f"{p} fired {len(outs)} times")
    return {p: outs[0] for p, outs in seen.items()}


def vit_hooks() -> None:
    folder = mf.OUT / "attention"
    out = folder / "hooks"
    model = mt.build()
    x = torch.from_numpy(np.load(folder / "inputs.npy"))
    paths = []
    roles = {}
    for i in range(len(model.encoder.layers)):
        block = f"encoder.layers.encoder_layer_{i}"
        for path, role in ((f"{block}.self_attention", "attention output"), (f"{block}.mlp.1", "MLP activation"), (block, "block output")):
            paths.append(path)
            roles[path] = role
    values = hooked(model, x, paths)
    for path, value in values.items():
        if value.ndim != 3:
            raise RuntimeError(f"{path}: expected [N, T, D], got {value.shape}")
        mf.save(out / f"{mf.slug(path)}.npy", value.astype(np.float32))
        mf.save(out / f"{mf.slug(path)}_means.npy", value.astype(np.float64).mean(axis=1))
    for opset in (14, 17):
        proto = __import__("onnx").load(str(folder / f"vit-opset{opset}.onnx"))
        index = [{"module": p, "onnx": mf.onnx_output_of(proto, p), "slug": mf.slug(p), "role": roles[p]} for p in paths]
        (out / f"index-opset{opset}.json").write_text(json.dumps(index, indent=2) + "\n")
    print(f"attention hooks: {len(paths)} modules, opsets 14 and 17")


class ChannelsLast(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.conv = nn.Conv2d(3, 4, 3)
        self.mix = nn.Linear(4, 5)
        self.relu = nn.ReLU()
        self.head = nn.Linear(5, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        y = self.conv(x).permute(0, 2, 3, 1)  # [N, H, W, C]
        y = self.relu(self.mix(y))
        return self.head(y.mean(dim=(1, 2)))


class Attention(nn.Module):
    """One attention layer written batch first: [N, T, D] → [N, H, T, d] → softmax [N, H, T, T]."""

    def __init__(self, dim: int, heads: int) -> None:
        super().__init__()
        self.heads = heads
        self.q = nn.Linear(dim, dim)
        self.k = nn.Linear(dim, dim)
        self.v = nn.Linear(dim, dim)
        self.softmax = nn.Softmax(dim=-1)
        self.proj = nn.Linear(dim, dim)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        n, t, d = x.shape
        h = self.heads
        q = self.q(x).reshape(n, t, h, d // h).transpose(1, 2)
        k = self.k(x).reshape(n, t, h, d // h).transpose(1, 2)
        v = self.v(x).reshape(n, t, h, d // h).transpose(1, 2)
        weights = self.softmax(q @ k.transpose(-2, -1) / (d // h) ** 0.5)
        return self.proj((weights @ v).transpose(1, 2).reshape(n, t, d))


class BatchFirstNet(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.embed = nn.Conv2d(3, 8, 4, stride=4)
        self.attention = Attention(8, 2)
        self.norm = nn.LayerNorm(8)
        self.head = nn.Linear(8, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        tokens = self.embed(x).flatten(2).transpose(1, 2)  # [N, 16, 8]
        tokens = tokens + self.attention(tokens)
        return self.head(self.norm(tokens).mean(dim=1))


class TanhGeluNet(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.embed = nn.Conv2d(3, 8, 4, stride=4)
        self.up = nn.Linear(8, 16)
        self.act = nn.GELU(approximate="tanh")
        self.down = nn.Linear(16, 8)
        self.head = nn.Linear(8, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        tokens = self.embed(x).flatten(2).transpose(1, 2)
        tokens = tokens + self.down(self.act(self.up(tokens)))
        return self.head(tokens.mean(dim=1))


def layout_networks() -> None:
    folder = mf.OUT / "layouts"
    index = {}
    torch.manual_seed(LAYOUT_SEED)
    x = torch.rand(2, 3, 8, 8)
    net = ChannelsLast().eval()
    mf.save(folder / "channels-last-inputs.npy", x.numpy())
    proto = mf.export(net, x, folder / "channels-last.onnx", 14)
    relu = hooked(net, x, ["relu"])["relu"]
    mf.save(folder / "relu.npy", relu.astype(np.float32))
    mf.save(folder / "relu_means.npy", relu.astype(np.float64).mean(axis=(1, 2)))
    index["channels-last"] = {"relu": mf.onnx_output_of(proto, "relu")}

    torch.manual_seed(LAYOUT_SEED + 1)
    x = torch.rand(2, 3, 16, 16)
    net = BatchFirstNet().eval()
    mf.save(folder / "attention-batch-first-inputs.npy", x.numpy())
    proto = mf.export(net, x, folder / "attention-batch-first.onnx", 14)
    softmax = hooked(net, x, ["attention.softmax"])["attention.softmax"]
    mf.save(folder / "softmax.npy", softmax.astype(np.float32))
    mf.save(folder / "softmax_means.npy", softmax.astype(np.float64).mean(axis=(2, 3)))
    index["attention-batch-first"] = {"softmax": mf.onnx_output_of(proto, "attention.softmax"), "attention": mf.onnx_output_of(proto, "attention")}

    torch.manual_seed(LAYOUT_SEED + 2)
    net = TanhGeluNet().eval()
    proto = mf.export(net, torch.rand(2, 3, 16, 16), folder / "mlp-gelu-tanh.onnx", 14)
    index["mlp-gelu-tanh"] = {"act": mf.onnx_output_of(proto, "act")}
    (folder / "index.json").write_text(json.dumps(index, indent=2) + "\n")
    print("layouts: channels-last, batch-first attention, tanh GELU")


if __name__ == "__main__":
    vit_hooks()
    layout_networks()
