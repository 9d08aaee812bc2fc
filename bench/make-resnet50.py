#!/usr/bin/python3
"""Write a ResNet-50-sized ONNX model with random weights, for timing
occlusion maps only (explain/bench_test.go, BenchmarkResNet50).

torchvision's ResNet-50 (He et al. 2016) with its classifier replaced by
one logit, input 3 x 512 x 512 NCHW, dynamic batch, opset 17, and the
sidecar manifest midsag loads. Random weights: its output means nothing,
and the file is never committed. Runs offline with Debian's
python3-torch and python3-torchvision:

    /usr/bin/python3 bench/make-resnet50.py /tmp/midsag-resnet50.onnx
    MIDSAG_RESNET50=/tmp/midsag-resnet50.onnx go test -run '^$' -bench ResNet50 -benchtime 1x ./explain
"""
import json
import os
import sys

import torch
import torchvision


def main():
    out = sys.argv[1] if len(sys.argv) > 1 else "/tmp/midsag-resnet50.onnx"
    torch.manual_seed(0)
    net = torchvision.models.resnet50(weights=None)
    net.fc = torch.nn.Linear(net.fc.in_features, 1)
    net.eval()
    torch.onnx.export(net, torch.rand(1, 3, 512, 512), out, input_names=["input"], output_names=["logit"],
                      dynamic_axes={"input": {0: "batch"}, "logit": {0: "batch"}}, opset_version=17)
    manifest = {
        "schema": "midsag.manifest/v1", "name": "resnet50-random", "version": "0", "labels": ["neg", "pos"],
        "description": "timing only", "intended_use": "timing only", "training_cohort": "none",
        "input": {"name": "input", "layout": "NCHW", "height": 512, "width": 512, "slices": 3, "slice_step": 1,
                  "normalize": "percentile", "percentile_low": 1, "percentile_high": 99},
        "output": {"name": "logit", "kind": "logit", "positive_index": 0},
        "calibration": {"method": "identity"}, "threshold": 0.5,
    }
    with open(os.path.splitext(out)[0] + ".manifest.json", "w") as f:
        json.dump(manifest, f, indent=1)
    print("wrote", out)


if __name__ == "__main__":
    main()
