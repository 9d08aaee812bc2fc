#!/usr/bin/python3
"""Writes the tiny ONNX test models of package models and reference.json.

Run from this folder with the system Python that has torch, numpy and onnx:

    /usr/bin/python3 make_models.py

It is not run in CI; its outputs are committed. PyTorch is the outside
reference: reference.json records the outputs torch computed for a fixed
input, and the op_type counts that the onnx package reads from each graph,
so the Go tests compare ONNX Runtime and our protobuf walker against them.
"""
import collections
import json
import math

import numpy as np
import onnx
import torch
from torch import nn

SEED = 20240601
OPSET = 17


class Tiny(nn.Module):
    """Conv, ReLU, global average pool, linear: the smallest CNN shaped like
    the real classifier (2.5D slices as channels in, logits out)."""

    def __init__(self, in_ch, outputs, sigmoid=False):
        super().__init__()
        self.conv = nn.Conv2d(in_ch, 4, kernel_size=3, padding=1)
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(4, outputs)
        self.sigmoid = sigmoid

    def forward(self, x):
        x = torch.relu(self.conv(x))
        x = torch.flatten(self.pool(x), 1)
        x = self.fc(x)
        return torch.sigmoid(x) if self.sigmoid else x


def manifest(name, out_name, kind, positive_index, calibration, description):
    return {
        "schema": "midsag.manifest/v1",
        "name": name,
        "version": "0.1.0",
        "description": description,
        "intended_use": "unit tests of package models only; random weights",
        "training_cohort": "none (random weights, seed %d)" % SEED,
        "labels": ["no_compression", "compression"],
        "input": {"name": "input", "layout": "NCHW", "height": 32, "width": 32,
                  "slices": 3, "slice_step": 1, "pixel_spacing_mm": 0,
                  "normalize": "percentile", "percentile_low": 1,
                  "percentile_high": 99, "mean": [], "std": []},
        "output": {"name": out_name, "kind": kind, "positive_index": positive_index},
        "calibration": calibration,
        "threshold": 0.5,
    }


def ref_input(shape):
    # x[i] = sin(0.05 * i) over the flattened tensor: a formula the Go test
    # rebuilds exactly, with no file to share.
    n = int(np.prod(shape))
    return np.sin(0.05 * np.arange(n, dtype=np.float64)).astype(np.float32).reshape(shape)


def export(model, path, in_shape, out_name, dynamic, man):
    model.eval()
    dummy = torch.zeros(in_shape)
    axes = {"input": {0: "N"}, out_name: {0: "N"}} if dynamic else None
    torch.onnx.export(model, dummy, path, input_names=["input"],
                      output_names=[out_name], dynamic_axes=axes,
                      opset_version=OPSET, do_constant_folding=True)
    m = onnx.load(path)
    entry = m.metadata_props.add()
    entry.key = "midsag.manifest"
    entry.value = json.dumps(man, indent=1)
    onnx.save(m, path)
    m = onnx.load(path)
    onnx.checker.check_model(m)
    ops = collections.Counter(n.op_type for n in m.graph.node)
    return {
        "ir_version": m.ir_version,
        "producer_name": m.producer_name,
        "producer_version": m.producer_version,
        "opset": {i.domain: i.version for i in m.opset_import},
        "op_counts": dict(sorted(ops.items())),
        "nodes": len(m.graph.node),
    }


def main():
    ref = {
        "torch_version": torch.__version__,
        "onnx_version": onnx.__version__,
        "input_formula": "x[i] = float32(sin(0.05 * i)) over the flattened input, row-major",
        "models": {},
    }
    cases = [
        # file, in_ch, outputs, sigmoid, out name, kind, positive, dynamic, batch, calibration
        ("tiny_logit.onnx", 3, 1, False, "logit", "logit", 0, True, 4,
         {"method": "temperature", "temperature": 1.7}),
        ("tiny_two.onnx", 3, 2, False, "logits", "logit", 1, True, 4,
         {"method": "identity"}),
        ("tiny_prob.onnx", 3, 1, True, "prob", "probability", 0, True, 4,
         {"method": "identity"}),
        ("tiny_batch1.onnx", 3, 1, False, "logit", "logit", 0, False, 1,
         {"method": "identity"}),
        ("fixed224.onnx", 1, 1, False, "logit", "logit", 0, False, 1,
         {"method": "identity"}),
    ]
    for (fname, in_ch, outs, sig, out_name, kind, pos, dyn, batch, cal) in cases:
        torch.manual_seed(SEED)
        model = Tiny(in_ch, outs, sig)
        hw = 224 if fname == "fixed224.onnx" else 32
        export_shape = (batch if not dyn else 1, in_ch, hw, hw)
        man = manifest(fname[:-5], out_name, kind, pos, cal,
                       "tiny test CNN exported by make_models.py")
        info = export(model, fname, export_shape, out_name, dyn, man)
        # fixed224 exists only to be refused; the others get outputs.
        if fname != "fixed224.onnx":
            run_shape = (4, in_ch, hw, hw)
            x = ref_input(run_shape)
            with torch.no_grad():
                y = model(torch.from_numpy(x)).numpy().astype(np.float64)
            info["input_shape"] = list(run_shape)
            info["output"] = y.tolist()
        ref["models"][fname] = info
    with open("reference.json", "w") as f:
        json.dump(ref, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
