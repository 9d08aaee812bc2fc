#!/usr/bin/python3
"""Writes linear.onnx, its sidecar manifest and linear-weights.f32.

Run from this folder with the system Python that has torch and onnx:

    /usr/bin/python3 make_linear.py

Not run in CI; its outputs are committed. The model is one weighted sum of
its [N,3,32,32] input plus a bias, output as a logit [N,1] (the manifest
says kind "logit"; midsag applies the sigmoid). Being linear, the drop in
its output when a patch is replaced by a baseline is exactly the sum over
the patch of weight x (input - baseline), which the explain tests check.
linear-weights.f32 holds the 3072 weights in NCHW order and then the bias,
float32 little endian, as torch holds them.
"""
import json

import numpy as np
import torch
from torch import nn

SEED = 20261201
torch.manual_seed(SEED)


class Linear(nn.Module):
    def __init__(self):
        super().__init__()
        self.fc = nn.Linear(3 * 32 * 32, 1)

    def forward(self, x):
        return self.fc(torch.flatten(x, 1))


m = Linear().eval()
with torch.no_grad():
    m.fc.weight.normal_(0, 1)
    m.fc.bias.fill_(0.25)
torch.onnx.export(m, torch.zeros(1, 3, 32, 32), "linear.onnx", input_names=["input"],
                  output_names=["logit"], dynamic_axes={"input": {0: "n"}, "logit": {0: "n"}},
                  opset_version=17)
w = m.fc.weight.detach().numpy().astype("<f4").ravel()
b = m.fc.bias.detach().numpy().astype("<f4")
np.concatenate([w, b]).tofile("linear-weights.f32")
json.dump({
    "schema": "midsag.manifest/v1",
    "name": "explain-linear-test",
    "version": "0.1.0",
    "description": "A weighted sum of the input plus a bias: explain's occlusion test model.",
    "intended_use": "unit tests of package explain only; random weights",
    "training_cohort": "none (random weights, seed %d)" % SEED,
    "labels": ["no_compression", "compression"],
    "input": {"name": "input", "layout": "NCHW", "height": 32, "width": 32,
              "slices": 3, "slice_step": 1, "pixel_spacing_mm": 0,
              "normalize": "percentile", "percentile_low": 1, "percentile_high": 99},
    "output": {"name": "logit", "kind": "logit", "positive_index": 0},
    "calibration": {"method": "identity"},
    "threshold": 0.5,
}, open("linear.manifest.json", "w"), indent=1)
print("wrote linear.onnx, linear.manifest.json, linear-weights.f32")
