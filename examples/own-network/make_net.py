#!/usr/bin/python3
"""A small seeded convolutional network exported to ONNX, standing in for "your own network" in the
README walkthrough (its 10 output units are classes the glyph labels do not name, as an ImageNet
network's 1000 would be). Run with Debian's interpreter (python3-torch):

    /usr/bin/python3 examples/own-network/make_net.py

Writes examples/own-network/net.onnx (committed, so the walkthrough runs without Python).
"""
import os

import torch
from torch import nn

torch.manual_seed(2026)


class SmallNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.block1 = nn.Sequential(nn.Conv2d(3, 8, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2))
        self.block2 = nn.Sequential(nn.Conv2d(8, 16, 3, padding=1), nn.ReLU(), nn.MaxPool2d(2))
        self.block3 = nn.Sequential(nn.Conv2d(16, 32, 3, padding=1), nn.ReLU())
        self.head = nn.Sequential(nn.AdaptiveAvgPool2d(1), nn.Flatten(), nn.Linear(32, 10))

    def forward(self, x):
        return self.head(self.block3(self.block2(self.block1(x))))


model = SmallNet().eval()
path = os.path.join(os.path.dirname(os.path.abspath(__file__)), 'net.onnx')
# --- the README's export snippet ---
torch.onnx.export(
    model, torch.zeros(1, 3, 64, 64), path,
    input_names=['image'], output_names=['logits'],
    dynamic_axes={'image': {0: 'batch'}, 'logits': {0: 'batch'}},
    opset_version=17,
)
# --- end of the snippet ---
print('wrote', path)
