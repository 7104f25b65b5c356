"""Exports seeded (untrained) torchvision networks to ONNX at 224 px for Sonde's real-size checks.

No weights can be downloaded here, so every parameter comes from torchvision's own initialisation
under torch.manual_seed(SEED). torchvision initialises the ViT classification head to zeros; it gets
seeded normal weights (std 0.02) so the logits depend on the input. The exported graphs have a dynamic
batch axis, input "input" [N, 3, 224, 224] and output "logits" [N, 1000]; a sidecar (NAME.json)
names the 1000 units unit-000 … unit-999 and the ImageNet preprocessing.

Usage: /usr/bin/python3 tools/torchvision/export_seeded.py OUT_DIR [vgg16] [resnet50] [vit_b_16]
(Debian: apt-get install -y python3-torch python3-torchvision python3-onnx)
"""
import json
import os
import sys

import torch
import torchvision

SEED = 0
OPSET = 14  # the opset the issues measured the ViT at


def build(name: str) -> torch.nn.Module:
    torch.manual_seed(SEED)
    model = getattr(torchvision.models, name)(weights=None)
    if name.startswith('vit'):
        head = model.heads.head
        torch.nn.init.normal_(head.weight, std=0.02)
        torch.nn.init.normal_(head.bias, std=0.02)
    return model.eval()


def main() -> None:
    if len(sys.argv) < 2:
        sys.exit(__doc__)
    out = sys.argv[1]
    names = sys.argv[2:] or ['vgg16', 'resnet50', 'vit_b_16']
    os.makedirs(out, exist_ok=True)
    for name in names:
        model = build(name)
        path = os.path.join(out, f'{name}.onnx')
        # exported with autograd on: under no_grad torchvision's attention takes a fused fast path that has
        # no ONNX form (aten::_native_multi_head_attention)
        torch.onnx.export(model, torch.zeros(1, 3, 224, 224), path, input_names=['input'], output_names=['logits'],
                          dynamic_axes={'input': {0: 'batch'}, 'logits': {0: 'batch'}}, opset_version=OPSET)
        sidecar = {
            'preprocessing': {'size': [224, 224], 'mean': [0.485, 0.456, 0.406], 'std': [0.229, 0.224, 0.225]},
            'outputs': {'name': 'logits', 'kinds': [f'unit-{k:03d}' for k in range(1000)]},
        }
        with open(os.path.join(out, f'{name}.json'), 'w') as f:
            json.dump(sidecar, f, indent=1)
        print(f'{name}: {path} ({os.path.getsize(path) / 1e6:.0f} MB)', flush=True)


if __name__ == '__main__':
    main()
