"""Writes PyTorch references for modulation at token tensors on the small seeded VisionTransformer of
make_gradient_fixtures.py (fixtures/attention/vit-opset14.onnx: 32 px, patches of 8, 2 layers, 2 heads,
width 16, 10 classes), into fixtures/attention/tokens/.

Run from the repository root with the Debian interpreter that has torch:

    /usr/bin/python3 tests/reference/make_token_fixtures.py

The model is rebuilt exactly as attention_network() builds it (same seed, same construction, same head
draw), so its weights are those of the committed ONNX files; the TypeScript test checks that by
comparing the unmodulated logits. Every reference is computed on a float64 copy with the committed
float32 inputs (fixtures/attention/inputs.npy) through forward hooks:

    logits.npy                 [2, 10] unmodulated
    feature_gain.npy           [16] a seeded gain per feature (U[0.5, 1.5])
    logits_feature_gain.npy    block 0's output a[n, t, f] replaced by a·g[f]
    head_gain.npy              [2] a gain per head
    logits_head_gain.npy       block 1's attention output before the output projection, viewed as
                               [tokens·batch, heads, 16/heads], multiplied by g[head]
    logits_head_lesion.npy     the same with head 0 set to 0 (and head 1 left at 1)
    logits_token_gain.npy      block 0's output ×2.5 at the class token and patch [1, 2] only (token 7)
    <slug>_gain.npy            [16, 10] mean_n sum_t (dy_nc / da_ntf) a_ntf   (per-feature gain sensitivity)
    <slug>_offset.npy          [16 or 32, 10] mean_n sum_t dy_nc / da_ntf
    index.json                 ONNX names of the sites and slugs
    heads-net.onnx             a tiny attention network whose heads stay batch-first before the output
                               projection ([N, T, 4·4], as timm writes it), seed 1911, opset 14
    heads_net_logits*.npy      its logits, unmodulated and with gains (1.5, 0, 0.75, 1.25) on its 4 heads
    heads_net_head_gain.npy    [4, 10] per-head gain sensitivities: mean_n d y_nc / d g_h at g = 1

PyTorch's MultiheadAttention calls torch.nn.functional.linear for the output projection inside
multi_head_attention_forward, so no module hook sees its input; the per-head hook wraps that function
and acts only when the weight is block 1's out_proj weight. Autograd stays on (as for the export):
without it torchvision's attention takes a fused path.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import torch
import torch.nn.functional as F

sys.path.insert(0, str(Path(__file__).resolve().parent))
import make_fixtures as mf  # noqa: E402

torch.set_num_threads(1)

ATTENTION_SEED = 7  # make_gradient_fixtures.ATTENTION_SEED
GAIN_SEED = 1907
FOLDER = mf.OUT / "attention"
OUT = FOLDER / "tokens"


def build() -> torch.nn.Module:
    """attention_network()'s model, rebuilt the same way."""
    from torchvision.models.vision_transformer import VisionTransformer

    torch.manual_seed(ATTENTION_SEED)
    model = VisionTransformer(image_size=32, patch_size=8, num_layers=2, num_heads=2, hidden_dim=16, mlp_dim=32, num_classes=10).eval()
    with torch.no_grad():
        model.heads.head.weight.normal_(0.0, 0.5)
        model.heads.head.bias.uniform_(-0.1, 0.1)
    return model


def with_hook(model: torch.nn.Module, module_path: str, change, x: torch.Tensor) -> np.ndarray:
    handle = mf.get_module(model, module_path).register_forward_hook(lambda _m, _i, o: change(o))
    try:
        return model(x).detach().numpy()
    finally:
        handle.remove()


def with_head_gain(model: torch.nn.Module, block: int, gains: torch.Tensor, x: torch.Tensor) -> np.ndarray:
    weight = model.encoder.layers[block].self_attention.out_proj.weight
    heads = gains.numel()
    original = F.linear

    def linear(inp, w, b=None):
        if w is weight:
            d = inp.shape[-1] // heads
            inp = (inp.reshape(*inp.shape[:-1], heads, d) * gains.view(heads, 1)).reshape(inp.shape)
        return original(inp, w, b)

    F.linear = linear
    try:
        return model(x).detach().numpy()
    finally:
        F.linear = original


def token_gradients(model: torch.nn.Module, x: torch.Tensor, module_path: str) -> tuple[np.ndarray, np.ndarray]:
    """[D, K] gain and offset sensitivities of a [N, T, D] module output (features on the last axis)."""
    seen = []
    probe = mf.get_module(model, module_path).register_forward_hook(lambda _m, _i, o: seen.append(o.shape))
    model(x)
    probe.remove()
    if len(seen) != 1 or len(seen[0]) != 3:
        raise RuntimeError(f"{module_path}: expected one [N, T, D] output, saw {seen}")
    features = seen[0][2]
    g = torch.ones(features, dtype=x.dtype, requires_grad=True)
    b = torch.zeros(features, dtype=x.dtype, requires_grad=True)
    handle = mf.get_module(model, module_path).register_forward_hook(lambda _m, _i, o: o * g.view(1, 1, -1) + b.view(1, 1, -1))
    y = model(x)
    handle.remove()
    n, k_out = y.shape
    gain = np.zeros((features, k_out))
    offset = np.zeros((features, k_out))
    for c in range(k_out):
        dg, db = torch.autograd.grad(y[:, c].sum(), [g, b], retain_graph=True)
        gain[:, c] = dg.detach().numpy() / n
        offset[:, c] = db.detach().numpy() / n
    return gain, offset


def attention_input_name(proto, block: int) -> str:
    """The tensor block `block`'s output projection (Gemm or MatMul) reads: the heads, concatenated."""
    scope = f"/encoder/layers/encoder_layer_{block}/self_attention/"
    for node in proto.graph.node:
        if node.name.startswith(scope) and node.op_type in ("Gemm", "MatMul") and any("out_proj" in i for i in node.input):
            return node.input[0]
    raise RuntimeError(f"no output projection in {scope}")


class HeadsNet(torch.nn.Module):
    """A tiny attention network whose heads stay batch-first before the output projection (as in timm's
    Attention: (attn @ v).transpose(1, 2).reshape(N, T, D)): patch embedding (3 → 16, patches of 8 on
    32 px: 16 tokens), one multi-head self-attention (4 heads of 4), output projection, mean over tokens,
    a linear head to 10 units."""

    def __init__(self) -> None:
        super().__init__()
        self.embed = torch.nn.Conv2d(3, 16, 8, 8)
        self.qkv = torch.nn.Linear(16, 48)
        self.proj = torch.nn.Linear(16, 16)
        self.head = torch.nn.Linear(16, 10)
        self.heads = 4

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        t = self.embed(x).flatten(2).transpose(1, 2)  # [N, T, D]
        n, tokens, d = t.shape
        qkv = self.qkv(t).reshape(n, tokens, 3, self.heads, d // self.heads).permute(2, 0, 3, 1, 4)
        q, k, v = qkv[0], qkv[1], qkv[2]
        attn = torch.softmax(q @ k.transpose(-2, -1) * (d // self.heads) ** -0.5, dim=-1)
        merged = self.merge(attn @ v)  # [N, T, D], heads concatenated: the site
        return self.head(self.proj(merged).mean(1))

    def merge(self, values: torch.Tensor) -> torch.Tensor:
        n, h, tokens, dh = values.shape
        return values.transpose(1, 2).reshape(n, tokens, h * dh)


HEADS_SEED = 1911


def heads_network(x: torch.Tensor) -> dict:
    """heads-net.onnx with a per-head gain reference and per-head autograd sensitivities at its merged heads."""
    torch.manual_seed(HEADS_SEED)
    net = HeadsNet().eval()
    mf.export(net, x.float(), OUT / "heads-net.onnx", 14)
    proto = __import__("onnx").load(str(OUT / "heads-net.onnx"))
    site = next(n.output[0] for n in proto.graph.node if n.op_type == "Reshape" and any(c.op_type in ("MatMul", "Gemm") and n.output[0] in c.input for c in proto.graph.node))
    net = net.double()
    mf.save(OUT / "heads_net_logits.npy", net(x).detach().numpy())
    gains = torch.tensor([1.5, 0.0, 0.75, 1.25], dtype=torch.float64)
    original = net.merge
    net.merge = lambda v: original(v * gains.view(1, -1, 1, 1))  # head h of the merged tensor = values[:, h]
    mf.save(OUT / "heads_net_logits_gain.npy", net(x).detach().numpy())
    g = torch.ones(4, dtype=torch.float64, requires_grad=True)
    net.merge = lambda v: original(v * g.view(1, -1, 1, 1))
    y = net(x)
    n, k_out = y.shape
    per_head = np.zeros((4, k_out))
    for c in range(k_out):
        (dg,) = torch.autograd.grad(y[:, c].sum(), [g], retain_graph=True)
        per_head[:, c] = dg.detach().numpy() / n
    net.merge = original
    mf.save(OUT / "heads_net_head_gain.npy", per_head)
    return {"onnx": site, "heads": 4, "gains": gains.tolist()}


def main() -> None:
    import onnx

    proto = onnx.load(str(FOLDER / "vit-opset14.onnx"))
    model = build().double()
    x = torch.from_numpy(np.load(FOLDER / "inputs.npy")).double()
    OUT.mkdir(parents=True, exist_ok=True)
    mf.save(OUT / "logits.npy", model(x).detach().numpy())

    block0 = "encoder.layers.encoder_layer_0"
    torch.manual_seed(GAIN_SEED)
    feature_gain = torch.rand(16, dtype=torch.float64) + 0.5
    mf.save(OUT / "feature_gain.npy", feature_gain.numpy())
    mf.save(OUT / "logits_feature_gain.npy", with_hook(model, block0, lambda o: o * feature_gain.view(1, 1, -1), x))

    head_gain = torch.tensor([1.75, 0.4], dtype=torch.float64)
    mf.save(OUT / "head_gain.npy", head_gain.numpy())
    mf.save(OUT / "logits_head_gain.npy", with_head_gain(model, 1, head_gain, x))
    mf.save(OUT / "logits_head_lesion.npy", with_head_gain(model, 1, torch.tensor([0.0, 1.0], dtype=torch.float64), x))

    token_gain = torch.ones(1, 17, 1, dtype=torch.float64)
    token_gain[0, 0, 0] = 2.5  # class token
    token_gain[0, 1 + 1 * 4 + 2, 0] = 2.5  # patch [1, 2] of the 4×4 grid
    mf.save(OUT / "logits_token_gain.npy", with_hook(model, block0, lambda o: o * token_gain, x))

    sites = {block0: mf.onnx_output_of(proto, block0), "encoder.layers.encoder_layer_1.mlp.1": mf.onnx_output_of(proto, "encoder.layers.encoder_layer_1.mlp.1")}
    index = {"block0": sites[block0], "attention1": attention_input_name(proto, 1), "heads": 2, "sensitivities": []}
    for module, onnx_name in sites.items():
        gain, offset = token_gradients(model, x, module)
        s = mf.slug(module)
        mf.save(OUT / f"{s}_gain.npy", gain)
        mf.save(OUT / f"{s}_offset.npy", offset)
        index["sensitivities"].append({"module": module, "onnx": onnx_name, "slug": s, "features": gain.shape[0]})
    index["headsNet"] = heads_network(x)
    (OUT / "index.json").write_text(json.dumps(index, indent=2) + "\n")
    print(f"tokens: {json.dumps(index)}")


if __name__ == "__main__":
    main()
