"""Writes PyTorch autograd sensitivities at every mapped site of the four reference networks, for
Sonde's exact (gradient-graph) sensitivities to be checked against.

Run from the repository root with the Debian interpreter that has torch:

    /usr/bin/python3 tests/reference/make_gradient_fixtures.py

It also writes fixtures/attention/ (a small seeded torchvision VisionTransformer, see attention_network).

It rebuilds the seeded models of make_fixtures.py (same builders, same seeds, so the same weights as the
committed .onnx files), and for every tensor in <model>/mapping.json except the logits writes

    fixtures/<model>/gradients/<slug>_gain.npy    float64 [C, K]: mean_n sum_xy (dy_nc/da_nkxy) a_nkxy
    fixtures/<model>/gradients/<slug>_offset.npy  float64 [C, K]: mean_n sum_xy dy_nc/da_nkxy

computed on a float64 copy of the model with the float64 inputs (inputs.npy), through a forward hook
that replaces the site output a by a*g + b with g = 1, b = 0 as leaves, and autograd of sum_n y_nc with
respect to g and b. fixtures/<model>/gradients/index.json lists {module, onnx, slug, channels}.

With `--torchvision OUT [vgg16|resnet50 …]` it instead exports seeded torchvision VGG16 and ResNet-50 (torchvision's own
initialisation after torch.manual_seed, eval mode, BatchNorm statistics left at their defaults, 10
classes) to OUT/<model>.onnx, with 2 seeded uniform images per model (OUT/<model>/inputs.npy; VGG16
at 224 px, where its adaptive pooling to 7 x 7 is exportable, ResNet-50 at 64 px) and the same autograd files under
OUT/<model>/gradients/ for a few sites. These are large (VGG16 528 MB) and are not committed; the test
tests/reference/sensitivity-exact.test.ts reads them when SONDE_TORCHVISION_GRADIENTS=OUT is set.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import torch
import torchvision

sys.path.insert(0, str(Path(__file__).resolve().parent))
import make_fixtures as mf  # noqa: E402  (the builders and seeds of the committed fixtures)

torch.set_num_threads(1)

TORCHVISION_SEED = 5150
TORCHVISION_SIZE = {"vgg16": 224, "resnet50": 64}
TORCHVISION_SITES = {
    "vgg16": ["features.3", "features.15", "features.29", "classifier.1"],
    "resnet50": ["relu", "layer1.0", "layer2.3", "layer3.5", "layer4.2"],  # Bottleneck.relu runs 3 times per block: hook whole blocks
}


def gradients(model: torch.nn.Module, x: torch.Tensor, module_path: str) -> tuple[np.ndarray, np.ndarray]:
    """Autograd gain and offset sensitivities [C, K] of the module's output channels (batch-averaged)."""
    module = mf.get_module(model, module_path)
    seen: list[torch.Tensor] = []
    probe = module.register_forward_hook(lambda _m, _i, o: seen.append(o.detach().clone()))
    model(x)
    probe.remove()
    if len(seen) != 1:
        raise RuntimeError(f"{module_path} fired {len(seen)} times")
    shape = seen[0].shape
    channels = shape[1]
    view = (1, -1) + (1,) * (len(shape) - 2)
    g = torch.ones(channels, dtype=x.dtype, requires_grad=True)
    b = torch.zeros(channels, dtype=x.dtype, requires_grad=True)
    handle = module.register_forward_hook(lambda _m, _i, o: o * g.view(view) + b.view(view))
    y = model(x)
    handle.remove()
    n, k_out = y.shape
    gain = np.zeros((channels, k_out))
    offset = np.zeros((channels, k_out))
    for c in range(k_out):
        dg, db = torch.autograd.grad(y[:, c].sum(), [g, b], retain_graph=True)
        gain[:, c] = dg.detach().double().numpy() / n
        offset[:, c] = db.detach().double().numpy() / n
    return gain, offset


def reference_networks() -> None:
    x = torch.from_numpy(np.load(mf.OUT / "inputs.npy")).double()
    for name, build in mf.BUILDERS.items():
        model = build().double().eval()
        mapping = json.loads((mf.OUT / name / "mapping.json").read_text())
        folder = mf.OUT / name / "gradients"
        index = []
        for entry in mapping["tensors"]:
            if entry["onnx"] == "logits":
                continue
            gain, offset = gradients(model, x, entry["module"])
            s = mf.slug(entry["module"])
            mf.save(folder / f"{s}_gain.npy", gain)
            mf.save(folder / f"{s}_offset.npy", offset)
            index.append({"module": entry["module"], "onnx": entry["onnx"], "slug": s, "channels": gain.shape[0]})
        (folder / "index.json").write_text(json.dumps(index, indent=2) + "\n")
        print(f"{name}: {len(index)} sites")


ATTENTION_SEED = 7


def attention_network() -> None:
    """A small seeded torchvision VisionTransformer (32 px, patches of 8, 2 layers, 2 heads, width 16,
    10 classes; the zero-initialised head drawn from N(0, 0.5) with bias U[-0.1, 0.1] so the logits depend
    on the input), exported at opsets 14 (decomposed LayerNorm) and 17 (LayerNormalization), 2 seeded
    uniform images, and autograd at the patch-embedding convolution (the only site with a channel axis;
    everything after it is tokens): fixtures/attention/."""
    from torchvision.models.vision_transformer import VisionTransformer

    folder = mf.OUT / "attention"
    torch.manual_seed(ATTENTION_SEED)
    model = VisionTransformer(image_size=32, patch_size=8, num_layers=2, num_heads=2, hidden_dim=16, mlp_dim=32, num_classes=10).eval()
    with torch.no_grad():
        model.heads.head.weight.normal_(0.0, 0.5)
        model.heads.head.bias.uniform_(-0.1, 0.1)
    x = torch.rand(2, 3, 32, 32)
    mf.save(folder / "inputs.npy", x.numpy().astype(np.float32))
    for opset in (14, 17):
        mf.export(model, x, folder / f"vit-opset{opset}.onnx", opset)
    proto = __import__("onnx").load(str(folder / "vit-opset14.onnx"))
    gain, offset = gradients(model.double(), x.double(), "conv_proj")
    mf.save(folder / "gradients" / "conv_proj_gain.npy", gain)
    mf.save(folder / "gradients" / "conv_proj_offset.npy", offset)
    index = [{"module": "conv_proj", "onnx": mf.onnx_output_of(proto, "conv_proj"), "slug": "conv_proj", "channels": gain.shape[0]}]
    (folder / "gradients" / "index.json").write_text(json.dumps(index, indent=2) + "\n")
    print("attention: 1 site, opsets 14 and 17")


def torchvision_networks(out: Path, only: list[str]) -> None:
    out.mkdir(parents=True, exist_ok=True)
    for name in TORCHVISION_SITES:
        if only and name not in only:
            continue
        torch.manual_seed(mf.SEEDS["inputs"])
        size = TORCHVISION_SIZE[name]
        x = torch.rand(2, 3, size, size)
        mf.save(out / name / "inputs.npy", x.numpy().astype(np.float32))
        torch.manual_seed(TORCHVISION_SEED)
        model = getattr(torchvision.models, name)(num_classes=10).eval()
        mf.export(model, x, out / f"{name}.onnx", 13)
        proto = __import__("onnx").load(str(out / f"{name}.onnx"), load_external_data=False)
        m64 = model.double()
        folder = out / name / "gradients"
        index = []
        for path in TORCHVISION_SITES[name]:
            onnx_name = mf.onnx_output_of(proto, path)
            gain, offset = gradients(m64, x.double(), path)
            s = mf.slug(path)
            mf.save(folder / f"{s}_gain.npy", gain)
            mf.save(folder / f"{s}_offset.npy", offset)
            index.append({"module": path, "onnx": onnx_name, "slug": s, "channels": gain.shape[0]})
        (folder / "index.json").write_text(json.dumps(index, indent=2) + "\n")
        print(f"{name}: {len(index)} sites")


if __name__ == "__main__":
    if len(sys.argv) >= 3 and sys.argv[1] == "--torchvision":
        torchvision_networks(Path(sys.argv[2]).resolve(), sys.argv[3:])
    else:
        reference_networks()
        attention_network()
