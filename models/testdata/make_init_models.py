#!/usr/bin/python3
"""Writes the manifest-less ONNX models that "midsag model init" is tested
on, and init_reference.json with PyTorch's outputs for them.

Run from this folder with the system Python that has torch and numpy:

    /usr/bin/python3 make_init_models.py

It is not run in CI; its outputs are committed. Each model is the tiny CNN
of make_models.py shaped as a user would export it, with no manifest, so
the Go tests build the manifest with InitManifest, run the model with ONNX
Runtime and compare against torch's own outputs for the same input.
"""
import json

import numpy as np
import torch
from torch import nn

SEED = 20240602
OPSET = 17


class Tiny(nn.Module):
    """Conv, ReLU, global average pool, linear, then an optional head:
    "softmax" over two classes or "sigmoid"; nhwc permutes the input first
    as a channels-last training pipeline would."""

    def __init__(self, in_ch, outputs, head=None, nhwc=False):
        super().__init__()
        self.conv = nn.Conv2d(in_ch, 4, kernel_size=3, padding=1)
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(4, outputs)
        self.head, self.nhwc = head, nhwc

    def forward(self, x):
        if self.nhwc:
            x = x.permute(0, 3, 1, 2)
        x = torch.relu(self.conv(x))
        x = self.fc(torch.flatten(self.pool(x), 1))
        if self.head == "softmax":
            return torch.softmax(x, dim=1)
        if self.head == "sigmoid":
            return torch.sigmoid(x)
        return x


def ref_input(shape):
    # Same formula as make_models.py: x[i] = sin(0.05 * i), row-major.
    n = int(np.prod(shape))
    return np.sin(0.05 * np.arange(n, dtype=np.float64)).astype(np.float32).reshape(shape)


CASES = [
    # file, channels, outputs, head, nhwc, input name, output name
    ("init_softmax.onnx", 3, 2, "softmax", False, "image", "probs"),
    ("init_nhwc.onnx", 3, 1, None, True, "image", "logit"),
    ("init_five.onnx", 5, 1, None, False, "stack", "logit"),
]


def main():
    ref = {"torch_version": torch.__version__,
           "input_formula": "x[i] = float32(sin(0.05 * i)) over the flattened input, row-major",
           "models": {}}
    for fname, ch, outs, head, nhwc, in_name, out_name in CASES:
        torch.manual_seed(SEED)
        model = Tiny(ch, outs, head, nhwc).eval()
        shape = (4, 32, 32, ch) if nhwc else (4, ch, 32, 32)
        torch.onnx.export(model, torch.zeros((1,) + shape[1:]), fname,
                          input_names=[in_name], output_names=[out_name],
                          dynamic_axes={in_name: {0: "N"}, out_name: {0: "N"}},
                          opset_version=OPSET)
        with torch.no_grad():
            y = model(torch.from_numpy(ref_input(shape))).numpy().astype(np.float64)
        ref["models"][fname] = {"input_shape": list(shape), "output": y.tolist()}
    with open("init_reference.json", "w") as f:
        json.dump(ref, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
