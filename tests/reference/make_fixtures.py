"""Writes the PyTorch reference fixtures Sonde's tests compare against.

Run from the repository root with the Debian interpreter that has torch:

    /usr/bin/python3 tests/reference/make_fixtures.py

Everything is seeded (see SEEDS below), single-threaded, float32 unless a file says otherwise, and
written into tests/reference/fixtures/ (the folder is recreated). The layout is described in
tests/reference/README.md. Along the way the script checks its own results and stops with an error
(exit status 1) if a check does not hold:

- every exported graph passes onnx.checker.check_model;
- every mapped ONNX tensor name exists, is the only tensor leaving the hooked module's scope, and its
  shape from onnx.shape_inference equals the hooked PyTorch shape (batch axis symbolic or 4);
- every hooked module fired exactly once per forward pass (a module reused inside forward would make
  the hook ambiguous);
- the bias-free network satisfies f(a x) = a f(x) (positive homogeneity, exact property);
- the autograd sensitivities agree with the central-difference ones (step 1e-2) within 30% of the
  per-category maximum (SqueezeNet's site is that far off), and with the Richardson-extrapolated ones
  (steps 2e-3 and 1e-3) within 2.5%
  (the networks are piecewise linear, so a finite step crosses a few ReLU/Clip kinks; the difference
  is that, not an error: at the residual site it shrinks to ~1e-8 for a step of 1e-6);
- for the bias-free network, Euler's identity sum_k m_kc = mean_n y_nc holds (degree-1 homogeneity).
"""

from __future__ import annotations

import copy
import json
import shutil
import sys
from pathlib import Path

import numpy as np
import onnx
import onnx.shape_inference
import torch
import torch.nn as nn
import torchvision

torch.set_num_threads(1)
torch.use_deterministic_algorithms(True)

HERE = Path(__file__).resolve().parent
OUT = HERE / "fixtures"

# Every random draw comes from one of these seeds (torch.manual_seed before each use).
SEEDS = {
    "inputs": 20240101,
    "calibration": 20240202,
    "residual": 101,
    "branching": 202,
    "homogeneous": 303,
    "gated": 404,
    "gain_residual": 1101,
    "gain_branching": 1202,
}

BATCH = 4
SIZE = 64
NUM_CLASSES = 10
OPSET = 13
OPSET_BY_MODEL = {"gated": 14}  # opset 14 has a HardSwish operator; 13 would export x * HardSigmoid(x)
SECANT_STEP = 1e-2
SECANT_LIMIT = 0.3  # the secant at 1e-2 crosses many kinks at SqueezeNet's site (0.24 there)
# Sonde's default: Richardson extrapolation (4 D(h/2) - D(h)) / 3 of central differences D at this h,
# per kind (an offset is added in activation units, so it needs a larger step than a gain against
# float32 rounding).
RICHARDSON_STEP = {"gain": 2e-3, "offset": 5e-3}
GATED_CLASSES = 8

# ImageNet channel statistics (torchvision's documented preprocessing constants), used only to make
# the random images look like preprocessed photographs.
IMAGENET_MEAN = (0.485, 0.456, 0.406)
IMAGENET_STD = (0.229, 0.224, 0.225)


# --------------------------------------------------------------------------------------------------
# Models


class Homogeneous(nn.Module):
    """Bias-free conv / ReLU / pooling / linear network: positively homogeneous of degree 1."""

    def __init__(self, num_classes: int = NUM_CLASSES) -> None:
        super().__init__()
        self.conv1 = nn.Conv2d(3, 8, 3, padding=1, bias=False)
        self.relu1 = nn.ReLU()
        self.pool1 = nn.MaxPool2d(2)  # 64 -> 32
        self.conv2 = nn.Conv2d(8, 16, 3, padding=1, bias=False)
        self.relu2 = nn.ReLU()
        self.pool2 = nn.MaxPool2d(2)  # 32 -> 16
        self.conv3 = nn.Conv2d(16, 16, 3, padding=1, bias=False)
        self.relu3 = nn.ReLU()
        self.conv4 = nn.Conv2d(16, 32, 3, padding=1, bias=False)
        self.relu4 = nn.ReLU()
        self.pool3 = nn.AvgPool2d(2)  # 16 -> 8
        self.conv5 = nn.Conv2d(32, 32, 3, padding=1, bias=False)
        self.relu5 = nn.ReLU()
        self.conv6 = nn.Conv2d(32, 32, 3, padding=1, bias=False)
        self.relu6 = nn.ReLU()
        self.gap = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(32, num_classes, bias=False)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        x = self.pool1(self.relu1(self.conv1(x)))
        x = self.pool2(self.relu2(self.conv2(x)))
        x = self.relu3(self.conv3(x))
        x = self.pool3(self.relu4(self.conv4(x)))
        x = self.relu5(self.conv5(x))
        x = self.gap(self.relu6(self.conv6(x)))
        return self.fc(torch.flatten(x, 1))


def randomize_batchnorm(model: nn.Module, calibration: torch.Tensor) -> None:
    """Gives every BatchNorm non-trivial, seeded parameters (the caller seeds torch).

    Affine weight ~ U[0.5, 1.5], bias ~ N(0, 0.1). Running statistics drawn from nothing would not
    match the data: torchvision's fan-out init makes depthwise convolutions shrink their input about
    C-fold, so with running_var ~ 1 the input-dependent part of the signal fades ~10x per stage and the
    logits become the same for every image. So the running statistics are first estimated on a
    seeded calibration batch (train mode, cumulative average), then jittered: mean += N(0, 0.1)·sd,
    var *= U[0.7, 1.4]. Leaves the model in eval mode.
    """
    norms = [m for m in model.modules() if isinstance(m, nn.BatchNorm2d)]
    for module in norms:
        c = module.num_features
        with torch.no_grad():
            module.weight.copy_(torch.empty(c).uniform_(0.5, 1.5))
            module.bias.copy_(torch.empty(c).normal_(0.0, 0.1))
        module.reset_running_stats()
        module.momentum = None  # cumulative moving average over the calibration pass
    model.train()
    with torch.no_grad():
        model(calibration)
    model.eval()
    for module in norms:
        c = module.num_features
        module.momentum = 0.1
        with torch.no_grad():
            sd = module.running_var.sqrt()
            module.running_mean.add_(torch.empty(c).normal_(0.0, 0.1) * sd)
            module.running_var.mul_(torch.empty(c).uniform_(0.7, 1.4))


def randomize_conv_biases(model: nn.Module) -> None:
    """Replaces the zero conv biases torchvision initialises (zero biases would be deduplicated by the
    exporter into Identity nodes) with small seeded values."""
    for module in model.modules():
        if isinstance(module, nn.Conv2d) and module.bias is not None:
            with torch.no_grad():
                module.bias.copy_(torch.empty(module.out_channels).uniform_(-0.1, 0.1))


def build_residual() -> nn.Module:
    calibration = make_images(SEEDS["calibration"], 16)
    torch.manual_seed(SEEDS["residual"])
    model = torchvision.models.mobilenet_v2(width_mult=0.5, num_classes=NUM_CLASSES)
    randomize_batchnorm(model, calibration)
    # torchvision draws the classifier from N(0, 0.01); a wider draw keeps logits away from zero.
    with torch.no_grad():
        model.classifier[1].weight.normal_(0.0, 0.05)
        model.classifier[1].bias.uniform_(-0.1, 0.1)
    return model.eval()


def build_branching() -> nn.Module:
    torch.manual_seed(SEEDS["branching"])
    model = torchvision.models.squeezenet1_1(num_classes=NUM_CLASSES)
    randomize_conv_biases(model)
    # The final 1x1 conv is followed by ReLU; torchvision's N(0, 0.01) draw would leave the logits
    # nearly zero, so draw it wider and shift the bias up so most logits stay positive.
    with torch.no_grad():
        model.classifier[1].weight.normal_(0.0, 0.05)
        model.classifier[1].bias.uniform_(0.0, 0.5)
    return model.eval()


def build_gated() -> nn.Module:
    """MobileNetV3-Small with squeeze-and-excitation gates, Hardswish/Hardsigmoid and residual Adds.

    reduced_tail=True (torchvision's option halving the last stage and the classifier width) and 8
    classes keep the file near 2.4 MB; the full tail would add 3.7 MB of classifier weights.
    """
    calibration = make_images(SEEDS["calibration"], 16)
    torch.manual_seed(SEEDS["gated"])
    model = torchvision.models.mobilenet_v3_small(num_classes=GATED_CLASSES, reduced_tail=True)
    randomize_conv_biases(model)  # the SE convolutions have (zero-initialised) biases
    randomize_batchnorm(model, calibration)
    with torch.no_grad():
        model.classifier[3].weight.normal_(0.0, 0.05)
        model.classifier[3].bias.uniform_(-0.1, 0.1)
    return model.eval()


def build_homogeneous() -> nn.Module:
    torch.manual_seed(SEEDS["homogeneous"])
    model = Homogeneous()
    for module in model.modules():
        if isinstance(module, (nn.Conv2d, nn.Linear)):
            nn.init.kaiming_normal_(module.weight, nonlinearity="relu")
    return model.eval()


# Modules hooked per model (module path -> file slug is derived). "" is the whole model (its output).
TENSORS = {
    "residual": [
        "features.0.2",  # first conv's ReLU6 (Clip)
        "features.1.conv.0.2",  # depthwise ReLU6
        "features.2.conv.1.2",  # strided depthwise ReLU6
        "features.3",  # block output after Add
        "features.5",  # Add
        "features.6.conv.0.2",  # expansion ReLU6 (modulation site)
        "features.6",  # Add
        "features.9.conv.1.2",  # depthwise ReLU6
        "features.9",  # Add
        "features.13",  # Add
        "features.16.conv.1.2",  # depthwise ReLU6 (sensitivity site)
        "features.16",  # Add
        "features.18.2",  # last ReLU6 before pooling
        "classifier.1",  # Gemm -> logits
    ],
    "branching": [
        "features.1",  # ReLU after the stem conv
        "features.2",  # MaxPool
        "features.3",  # Fire Concat
        "features.4.squeeze_activation",  # ReLU
        "features.5",  # MaxPool
        "features.6",  # Concat
        "features.7.squeeze_activation",  # ReLU
        "features.7.expand3x3_activation",  # ReLU inside a branch (modulation site)
        "features.7",  # Concat
        "features.8",  # MaxPool
        "features.9.expand3x3_activation",  # ReLU inside a branch (sensitivity site)
        "features.10",  # Concat
        "features.12",  # Concat
        "classifier.2",  # ReLU after the classifier conv
        "classifier.3",  # GlobalAveragePool
        "",  # model output (Flatten) -> logits
    ],
    "gated": [
        "features.0.2",  # stem Hardswish
        "features.3.block.1.2",  # depthwise ReLU
        "features.4",  # block output (no Add: stride 2)
        "features.6.block.1.2",  # depthwise Hardswish before an SE gate (sensitivity site)
        "features.6.block.2",  # SqueezeExcitation output (x * Hardsigmoid(fc2(...)))
        "features.6",  # Add
        "features.12.2",  # last Hardswish before pooling
        "classifier.3",  # Gemm -> logits
    ],
    "homogeneous": [
        "relu1",
        "pool1",  # MaxPool
        "relu2",
        "pool2",
        "relu3",
        "relu4",  # sensitivity site
        "pool3",  # AveragePool
        "relu5",
        "relu6",
        "gap",  # GlobalAveragePool
        "fc",  # logits
    ],
}

MODULATION = {
    "residual": {"site": "features.6.conv.0.2", "downstream": ["features.6", "features.9", "features.16"]},
    "branching": {"site": "features.7.expand3x3_activation", "downstream": ["features.7", "features.10", "classifier.2"]},
}

SENSITIVITY = {
    "residual": "features.16.conv.1.2",
    "homogeneous": "relu4",
    "branching": "features.9.expand3x3_activation",
    "gated": "features.6.block.1.2",
}

BUILDERS = {"residual": build_residual, "branching": build_branching, "homogeneous": build_homogeneous, "gated": build_gated}


# --------------------------------------------------------------------------------------------------
# Helpers


def slug(module_path: str) -> str:
    return module_path.replace(".", "_") if module_path else "logits"


def get_module(model: nn.Module, path: str) -> nn.Module:
    return model if path == "" else model.get_submodule(path)


def make_images(seed: int, count: int) -> torch.Tensor:
    """Seeded smooth random colour images, normalised like torchvision's ImageNet preprocessing.

    Pure pixel noise would not do: after global pooling every noise image looks the same, so the
    logits would hardly depend on the input. Each image is a mix of random colour fields at three
    scales (4x4 and 16x16 grids upsampled bilinearly, plus pixel noise), so images differ globally.
    """
    torch.manual_seed(seed)
    coarse = torch.rand(count, 3, 4, 4)
    mid = torch.rand(count, 3, 16, 16)
    fine = torch.rand(count, 3, SIZE, SIZE)
    up = lambda t: nn.functional.interpolate(t, size=SIZE, mode="bilinear", align_corners=False)
    x = 0.6 * up(coarse) + 0.3 * up(mid) + 0.1 * fine
    mean = torch.tensor(IMAGENET_MEAN).view(1, 3, 1, 1)
    std = torch.tensor(IMAGENET_STD).view(1, 3, 1, 1)
    return ((x - mean) / std).float().contiguous()


def make_inputs() -> torch.Tensor:
    return make_images(SEEDS["inputs"], BATCH)


def save(path: Path, array: np.ndarray) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    np.save(path, np.ascontiguousarray(array))


def export(model: nn.Module, x: torch.Tensor, path: Path, opset: int = OPSET) -> onnx.ModelProto:
    torch.onnx.export(
        model,
        x,
        str(path),
        opset_version=opset,
        input_names=["input"],
        output_names=["logits"],
        dynamic_axes={"input": {0: "batch"}, "logits": {0: "batch"}},
        do_constant_folding=True,
    )
    proto = onnx.load(str(path))
    onnx.checker.check_model(proto)
    return proto


def record(model: nn.Module, x: torch.Tensor, paths: list[str], edit=None) -> dict[str, torch.Tensor]:
    """Runs model(x) with forward hooks on `paths`; returns each module's output (cloned). `edit`
    optionally maps (path, output) -> replacement output, applied before recording. Fails if a
    hooked module fires more or less than once."""
    seen: dict[str, list[torch.Tensor]] = {p: [] for p in paths}
    handles = []
    for p in paths:
        def hook(_module, _inputs, output, p=p):
            if edit is not None:
                replaced = edit(p, output)
                if replaced is not None:
                    output = replaced
            seen[p].append(output.detach().clone())
            return output
        handles.append(get_module(model, p).register_forward_hook(hook))
    try:
        with torch.no_grad():
            logits = model(x)
    finally:
        for h in handles:
            h.remove()
    result = {}
    for p, outs in seen.items():
        if len(outs) != 1:
            raise RuntimeError(f"module {p!r} fired {len(outs)} times in one forward pass; pick another")
        result[p] = outs[0]
    result["__logits__"] = logits.detach().clone()
    return result


def module_path_of(node_name: str) -> str:
    """The module path a torch 1.13 ONNX node was emitted from, resolved from its scoped name.

    The exporter names a node '/<scope>/<scope>/.../<Op>'. A scope is a module's attribute name,
    except that the children of a container (Sequential, ModuleList) get the container's scope name
    as a prefix: '/features/features.3/conv/conv.0/conv.0.2/Clip' is features -> features.3 (child '3'
    of features) -> conv -> conv.0 -> conv.0.2, i.e. module 'features.3.conv.0.2'. A scope that holds
    a dot must therefore extend the previous scope by exactly one attribute name; anything else means
    the naming scheme is not the one assumed here, and the script stops.
    """
    if not node_name.startswith("/"):
        return ""
    scopes = node_name.split("/")[1:-1]
    parts: list[str] = []
    prev = ""
    for scope in scopes:
        if "." in scope:
            if not (prev and scope.startswith(prev + ".") and "." not in scope[len(prev) + 1:]):
                raise RuntimeError(f"unexpected scope {scope!r} after {prev!r} in node {node_name!r}")
            parts.append(scope[len(prev) + 1:])
        else:
            parts.append(scope)
        prev = scope
    return ".".join(parts)


def in_module(node_name: str, module_path: str) -> bool:
    path = module_path_of(node_name)
    return path == module_path or path.startswith(module_path + ".")


def onnx_output_of(proto: onnx.ModelProto, module_path: str) -> str:
    """The one tensor that leaves the scope of `module_path` (produced inside, consumed outside or a
    graph output). Raises if there is not exactly one."""
    graph = proto.graph
    if module_path == "":
        if len(graph.output) != 1:
            raise RuntimeError("expected one graph output")
        return graph.output[0].name
    inside = [n for n in graph.node if in_module(n.name, module_path)]
    if not inside:
        raise RuntimeError(f"no ONNX node carries the scope {module_path!r}")
    produced = {o for n in inside for o in n.output}
    inside_ids = {id(n) for n in inside}
    leaving = set()
    for n in graph.node:
        if id(n) in inside_ids:
            continue
        leaving.update(i for i in n.input if i in produced)
    leaving.update(o.name for o in graph.output if o.name in produced)
    if len(leaving) != 1:
        raise RuntimeError(f"module {module_path!r}: {len(leaving)} tensors leave its scope: {sorted(leaving)}")
    return leaving.pop()


def inferred_shapes(proto: onnx.ModelProto) -> dict[str, list]:
    inferred = onnx.shape_inference.infer_shapes(proto, strict_mode=True)
    shapes = {}
    for vi in list(inferred.graph.value_info) + list(inferred.graph.output) + list(inferred.graph.input):
        dims = []
        for d in vi.type.tensor_type.shape.dim:
            dims.append(d.dim_value if d.HasField("dim_value") else (d.dim_param or None))
        shapes[vi.name] = dims
    return shapes


def check_shape(name: str, inferred: dict[str, list], actual: list[int]) -> None:
    dims = inferred.get(name)
    if dims is None:
        raise RuntimeError(f"shape inference gave no shape for {name!r}")
    if len(dims) != len(actual) or dims[1:] != actual[1:] or dims[0] not in ("batch", BATCH):
        raise RuntimeError(f"{name!r}: inferred shape {dims} != hooked shape {actual}")


# --------------------------------------------------------------------------------------------------
# Fixture parts


def write_model(name: str, model: nn.Module, x: torch.Tensor) -> tuple[onnx.ModelProto, dict[str, str]]:
    proto = export(model, x, OUT / f"{name}.onnx", OPSET_BY_MODEL.get(name, OPSET))
    shapes = inferred_shapes(proto)
    acts = record(model, x, TENSORS[name])
    names: dict[str, str] = {}
    entries = []
    for path in TENSORS[name]:
        tensor_name = onnx_output_of(proto, path)
        value = acts[path]
        check_shape(tensor_name, shapes, list(value.shape))
        names[path] = tensor_name
        file = f"{name}/{slug(path)}.npy"
        save(OUT / file, value.numpy().astype(np.float32))
        entries.append({"module": path, "onnx": tensor_name, "shape": list(value.shape), "file": file})
    if not any(e["onnx"] == "logits" for e in entries):
        raise RuntimeError(f"{name}: no mapped tensor is the logits")
    if not torch.equal(acts["__logits__"], acts[TENSORS[name][-1]].reshape(acts["__logits__"].shape)):
        raise RuntimeError(f"{name}: last hooked module is not the model output")
    mapping = {"model": f"{name}.onnx", "input": "inputs.npy", "tensors": entries}
    (OUT / name / "mapping.json").write_text(json.dumps(mapping, indent=2) + "\n")
    print(f"{name}: {len(entries)} tensors, {sum(int(np.prod(e['shape'])) for e in entries)} values")
    return proto, names


def write_modulated(name: str, model: nn.Module, x: torch.Tensor, names: dict[str, str]) -> None:
    spec = MODULATION[name]
    site = spec["site"]
    base = record(model, x, [site])
    channels = base[site].shape[1]
    torch.manual_seed(SEEDS[f"gain_{name}"])
    gain = torch.empty(channels).uniform_(0.5, 1.5).float()
    folder = OUT / name / "modulated"
    save(folder / "gain.npy", gain.numpy())

    def edit(path: str, output: torch.Tensor):
        return output * gain.view(1, -1, 1, 1) if path == site else None

    downstream = spec["downstream"]
    acts = record(model, x, [site] + downstream, edit=edit)
    tensors = []
    for path in downstream:
        file = f"{slug(path)}.npy"
        save(folder / file, acts[path].numpy().astype(np.float32))
        tensors.append({"onnx": names[path], "file": file})
    save(folder / "logits.npy", acts["__logits__"].numpy().astype(np.float32))
    tensors.append({"onnx": "logits", "file": "logits.npy"})
    plain = record(model, x, [])["__logits__"]
    change = (acts["__logits__"] - plain).norm() / plain.norm()
    print(f"{name}: modulated at {names[site]} (C={channels}); relative logit change {change:.4f}")
    site_json = {"site": names[site], "module": site, "tensors": tensors}
    (folder / "site.json").write_text(json.dumps(site_json, indent=2) + "\n")


def write_sensitivity(name: str, model: nn.Module, x: torch.Tensor, names: dict[str, str]) -> None:
    site = SENSITIVITY[name]
    m64 = copy.deepcopy(model).double().eval()
    x64 = x.double()
    module = get_module(m64, site)
    channels = record(m64, x64, [site])[site].shape[1]
    n = x64.shape[0]

    # Autograd: a hook replaces the site output a by a*g + b with g = 1, b = 0 as leaves, so that
    # d(sum_n y_nc)/dg_k = sum_n sum_xy (dy_nc/da_nkxy) a_nkxy and likewise for b (no a-derivative).
    g = torch.ones(channels, dtype=torch.float64, requires_grad=True)
    b = torch.zeros(channels, dtype=torch.float64, requires_grad=True)
    calls = []

    def grad_hook(_m, _i, output):
        calls.append(1)
        return output * g.view(1, -1, 1, 1) + b.view(1, -1, 1, 1)

    handle = module.register_forward_hook(grad_hook)
    y = m64(x64)
    handle.remove()
    if len(calls) != 1:
        raise RuntimeError(f"sensitivity site {site!r} fired {len(calls)} times")
    k_out = y.shape[1]
    gain_exact = np.zeros((channels, k_out))
    offset_exact = np.zeros((channels, k_out))
    for c in range(k_out):
        dg, db = torch.autograd.grad(y[:, c].sum(), [g, b], retain_graph=True)
        gain_exact[:, c] = dg.numpy() / n
        offset_exact[:, c] = db.numpy() / n

    # Central differences with one channel perturbed at a time (float64 forward passes).
    h = SECANT_STEP
    scale = torch.ones(channels, dtype=torch.float64)
    shift = torch.zeros(channels, dtype=torch.float64)

    def affine_hook(_m, _i, output):
        return output * scale.view(1, -1, 1, 1) + shift.view(1, -1, 1, 1)

    handle = module.register_forward_hook(affine_hook)
    gain_secant = np.zeros((channels, k_out))
    offset_secant = np.zeros((channels, k_out))
    with torch.no_grad():
        for k in range(channels):
            scale[k] = 1 + h
            up = m64(x64)
            scale[k] = 1 - h
            down = m64(x64)
            scale[k] = 1
            gain_secant[k] = ((up - down) / (2 * h)).mean(0).numpy()
            shift[k] = h
            up = m64(x64)
            shift[k] = -h
            down = m64(x64)
            shift[k] = 0
            offset_secant[k] = ((up - down) / (2 * h)).mean(0).numpy()
    handle.remove()
    gain_richardson = richardson(m64, module, x64, channels, k_out, "gain")
    offset_richardson = richardson(m64, module, x64, channels, k_out, "offset")

    def rel_diff(exact: np.ndarray, secant: np.ndarray) -> float:
        # A category whose readout is 0 for every stimulus after a final ReLU (SqueezeNet) has exact
        # derivatives 0; there the secant must be 0 too, and the category is left out of the ratio.
        per_cat = np.abs(exact).max(axis=0)
        dead = per_cat == 0
        if np.abs(secant[:, dead]).max(initial=0.0) != 0:
            raise RuntimeError(f"{name}: a finite difference is non-zero where autograd is 0 for a whole category")
        return float((np.abs(exact - secant)[:, ~dead] / per_cat[~dead]).max())

    dg_rel, db_rel = rel_diff(gain_exact, gain_secant), rel_diff(offset_exact, offset_secant)
    print(f"{name}: sensitivity at {names[site]} (C={channels}, K={k_out}); "
          f"max |exact-secant| / per-category max |exact|: gain {dg_rel:.2e}, offset {db_rel:.2e}")
    if dg_rel > SECANT_LIMIT or db_rel > SECANT_LIMIT:
        raise RuntimeError(f"{name}: secant and autograd sensitivities disagree by more than {SECANT_LIMIT:.0%}")
    rg_rel, rb_rel = rel_diff(gain_exact, gain_richardson), rel_diff(offset_exact, offset_richardson)
    print(f"{name}: Richardson (gain steps {RICHARDSON_STEP['gain']:g}, offset {RICHARDSON_STEP['offset']:g}, and their halves) vs autograd, max / per-category max: "
          f"gain {rg_rel:.2e}, offset {rb_rel:.2e}")
    if rg_rel > 0.025 or rb_rel > 0.025:
        raise RuntimeError(f"{name}: Richardson and autograd sensitivities disagree by more than 2.5%")
    if name == "homogeneous":
        # Euler's theorem for degree-1 homogeneous functions of the site: sum_k m_kc = mean_n y_nc.
        with torch.no_grad():
            y_mean = m64(x64).mean(0).numpy()
        euler = float(np.abs(gain_exact.sum(0) - y_mean).max() / np.abs(y_mean).max())
        print(f"{name}: Euler check max |sum_k m_kc - mean_n y_nc| / max |y| = {euler:.2e}")
        if euler > 1e-10:
            raise RuntimeError("homogeneous: Euler identity fails")

    folder = OUT / name / "sensitivity"
    save(folder / "gain_exact.npy", gain_exact.astype(np.float64))
    save(folder / "offset_exact.npy", offset_exact.astype(np.float64))
    save(folder / "gain_secant.npy", gain_secant.astype(np.float64))
    save(folder / "offset_secant.npy", offset_secant.astype(np.float64))
    save(folder / "gain_richardson.npy", gain_richardson.astype(np.float64))
    save(folder / "offset_richardson.npy", offset_richardson.astype(np.float64))
    site_json = {"site": names[site], "module": site, "step": h, "richardson_step": RICHARDSON_STEP["gain"], "richardson_offset_step": RICHARDSON_STEP["offset"], "channels": channels, "outputs": k_out}
    (folder / "site.json").write_text(json.dumps(site_json, indent=2) + "\n")


def richardson(m64: nn.Module, module: nn.Module, x64: torch.Tensor, channels: int, k_out: int, kind: str) -> np.ndarray:
    """Float64 Richardson extrapolation (4 D(h/2) - D(h)) / 3 of central differences D at
    h = RICHARDSON_STEP[kind], per channel, batch-averaged. Channels are perturbed CHUNK at a time: the batch
    stacks (channel, step, sign) copies of the N inputs, and a hook scales (kind gain) or shifts (kind
    offset) channel k of the site in its copies only."""
    n = x64.shape[0]
    h = RICHARDSON_STEP[kind]
    deltas = (h, -h, h / 2, -h / 2)
    chunk = 16
    state: dict[str, torch.Tensor] = {}

    def hook(_m, _i, output):
        return output * state["scale"][:, :, None, None] + state["shift"][:, :, None, None]

    handle = module.register_forward_hook(hook)
    out = np.zeros((channels, k_out))
    with torch.no_grad():
        for k0 in range(0, channels, chunk):
            ks = list(range(k0, min(channels, k0 + chunk)))
            rows = len(ks) * len(deltas) * n
            scale = torch.ones(rows, channels, dtype=torch.float64)
            shift = torch.zeros(rows, channels, dtype=torch.float64)
            for j, k in enumerate(ks):
                for v, d in enumerate(deltas):
                    r = (j * len(deltas) + v) * n
                    if kind == "gain":
                        scale[r:r + n, k] = 1 + d
                    else:
                        shift[r:r + n, k] = d
            state["scale"], state["shift"] = scale, shift
            y = m64(x64.repeat(len(ks) * len(deltas), 1, 1, 1)).view(len(ks), len(deltas), n, k_out).mean(2)
            d_h = (y[:, 0] - y[:, 1]) / (2 * h)
            d_half = (y[:, 2] - y[:, 3]) / h
            out[ks] = ((4 * d_half - d_h) / 3).numpy()
    handle.remove()
    return out


def check_homogeneity(model: nn.Module, x: torch.Tensor) -> None:
    with torch.no_grad():
        y = model(x)
        for alpha in (2.0, 0.37, 5.0):
            ya = model(alpha * x)
            err = float(((ya - alpha * y).abs().max() / (alpha * y).abs().max()))
            print(f"homogeneous: f({alpha} x) vs {alpha} f(x): max abs error / max |{alpha} f(x)| = {err:.2e}")
            if err > 1e-5:
                raise RuntimeError("homogeneous model is not positively homogeneous")


def main() -> int:
    global OUT
    if len(sys.argv) > 1:  # another output folder (to compare a regeneration with the committed files)
        OUT = Path(sys.argv[1]).resolve()
    only = set(sys.argv[2:])  # optionally only these models (development; the fixtures need all)
    print(f"torch {torch.__version__}, torchvision {torchvision.__version__}, onnx {onnx.__version__}")
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir(parents=True)
    x = make_inputs()
    save(OUT / "inputs.npy", x.numpy())
    for name, build in BUILDERS.items():
        if only and name not in only:
            continue
        model = build()
        if name == "homogeneous":
            check_homogeneity(model, x)
        _, names = write_model(name, model, x)
        if name in MODULATION:
            write_modulated(name, model, x, names)
        if name in SENSITIVITY:
            write_sensitivity(name, model, x, names)
    return 0


if __name__ == "__main__":
    sys.exit(main())
