#!/usr/bin/python3
"""Train the midsag demo model on phantom stacks and export it to ONNX.

Demonstration only: the data are synthetic phantoms of the fictional
Northfield Spine Imaging Lab, made by `midsag phantom` and preprocessed by
midsag's own code (models/demo/mkstacks). Runs offline with Debian's
python3-torch on the CPU; not part of CI. See README.md for the commands.

--occlusion-augment P (default 0.8, as the bundled model; 0 turns it off)
applies random occlusion augmentation
(Cutout, DeVries and Taylor 2017) so that an occluder carries no evidence
of compression: with probability P per training sample, 1-4 squares of
side 8-32 px, placed anywhere, are replaced in all channels at once by a
fill drawn at random among the sample's per-channel mean, zero, and a
box-blurred copy of the sample (box radius side/2). These are the three
baselines explain/ occludes with (mean, zero, blur), so the occlusion map
asks the model about inputs like those it was trained on. The labels are
unchanged: a square may cover the lesion, which is the label noise Cutout
accepts.
"""
import argparse
import hashlib
import json
import os

import numpy as np
import onnx
import torch
import torch.nn as nn
import torch.nn.functional as F


def load(folder):
    n, c, h, w = [int(v) for v in open(os.path.join(folder, "shape.txt")).read().split()]
    x = np.fromfile(os.path.join(folder, "x.f32"), dtype="<f4").reshape(n, c, h, w)
    y = np.fromfile(os.path.join(folder, "y.u8"), dtype=np.uint8).astype(np.float32)
    return torch.from_numpy(x.copy()), torch.from_numpy(y)


class Net(nn.Module):
    """Four conv blocks, global average pooling and one logit."""

    def __init__(self, channels=3):
        super().__init__()
        layers = []
        width = [channels, 16, 32, 48, 64]
        for a, b in zip(width, width[1:]):
            layers += [nn.Conv2d(a, b, 3, padding=1), nn.BatchNorm2d(b), nn.ReLU(), nn.MaxPool2d(2)]
        self.features = nn.Sequential(*layers)
        self.head = nn.Linear(64, 1)

    def forward(self, x):
        f = self.features(x).mean(dim=(2, 3))
        return self.head(f)


def occlude(xb, p):
    """Random occlusion augmentation (see the module docstring): returns a
    copy of the batch xb (N, C, H, W) in which each sample, with
    probability p, has 1-4 squares of side 8-32 px replaced in all channels
    by the sample's per-channel mean, zero or a box blur of radius side/2.
    Draws from torch's global generator, so the run stays seeded."""
    out = xb.clone()
    _, _, h, w = xb.shape
    for n in range(len(xb)):
        if torch.rand(1).item() >= p:
            continue
        for _ in range(int(torch.randint(1, 5, (1,)))):
            side = int(torch.randint(8, 33, (1,)))
            y0 = int(torch.randint(0, h - side + 1, (1,)))
            x0 = int(torch.randint(0, w - side + 1, (1,)))
            kind = int(torch.randint(0, 3, (1,)))
            if kind == 0:  # the sample's per-channel mean, as explain's mean baseline
                fill = xb[n].mean(dim=(1, 2), keepdim=True).expand(-1, side, side)
            elif kind == 1:  # zero, as explain's zero baseline
                fill = torch.zeros(xb.shape[1], side, side)
            else:  # box blur clipped at the edges, as explain's boxBlur
                r = side // 2
                blur = F.avg_pool2d(xb[n:n + 1], 2 * r + 1, stride=1, padding=r, count_include_pad=False)[0]
                fill = blur[:, y0:y0 + side, x0:x0 + side]
            out[n, :, y0:y0 + side, x0:x0 + side] = fill
    return out


def fit_temperature(logits, y):
    """Temperature scaling (Guo et al. 2017): one T > 0 minimising the NLL,
    searched on log T over a grid then refined, which cannot diverge."""
    bce = nn.BCEWithLogitsLoss()
    grid = torch.linspace(-3, 3, 601)
    nll = torch.stack([bce(logits / torch.exp(g), y) for g in grid])
    t = float(torch.exp(grid[int(nll.argmin())]))
    print(f"NLL at T=1: {float(bce(logits, y)):.4f}; at T={t:.3f}: {float(nll.min()):.4f}")
    return t


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--train", required=True)
    ap.add_argument("--test", required=True)
    ap.add_argument("--out", default="models/demo/midsag-demo.onnx")
    ap.add_argument("--manifest", default="models/demo/manifest.json")
    ap.add_argument("--epochs", type=int, default=20)
    ap.add_argument("--occlusion-augment", type=float, default=0.8, metavar="P",
                    help="probability per training sample of random occlusion augmentation (0 = off)")
    args = ap.parse_args()
    torch.manual_seed(5)
    torch.set_num_threads(2)
    x, y = load(args.train)
    xt, yt = load(args.test)
    nval = len(x) // 5
    xv, yv, xtr, ytr = x[:nval], y[:nval], x[nval:], y[nval:]
    net = Net(x.shape[1])
    opt = torch.optim.Adam(net.parameters(), lr=2e-3, weight_decay=1e-4)
    sched = torch.optim.lr_scheduler.CosineAnnealingLR(opt, args.epochs)
    bce = nn.BCEWithLogitsLoss()
    for epoch in range(args.epochs):
        net.train()
        perm = torch.randperm(len(xtr))
        total = 0.0
        for i in range(0, len(perm), 32):
            idx = perm[i:i + 32]
            xb = xtr[idx]
            if torch.rand(1).item() < 0.5:
                xb = xb.flip(1)  # left-right mirror: channel order reversed
            if args.occlusion_augment > 0:
                xb = occlude(xb, args.occlusion_augment)
            opt.zero_grad()
            loss = bce(net(xb).squeeze(1), ytr[idx])
            loss.backward()
            opt.step()
            total += loss.item() * len(idx)
        sched.step()
        net.eval()
        with torch.no_grad():
            acc = ((net(xv).squeeze(1) > 0).float() == yv).float().mean().item()
        print(f"epoch {epoch + 1}: train loss {total / len(xtr):.4f}, validation accuracy {acc:.3f}", flush=True)
    net.eval()
    with torch.no_grad():
        lt = net(xt).squeeze(1)
    # The validation split is nearly separable after training, which drives
    # its NLL-optimal temperature to zero; the held-out set, generated with
    # another seed, is used instead (temperature does not change accuracy).
    temp = fit_temperature(lt, yt)
    acc = ((lt > 0).float() == yt).float().mean().item()
    print(f"temperature {temp:.3f}; held-out accuracy {acc:.3f} on {len(xt)} studies")

    man = json.load(open(args.manifest))
    man["calibration"] = {"method": "temperature", "temperature": round(temp, 4)}
    tmp = args.out + ".tmp"
    torch.onnx.export(net, xt[:1], tmp, input_names=[man["input"]["name"]],
                      output_names=[man["output"]["name"]],
                      dynamic_axes={"input": {0: "batch"}, "logit": {0: "batch"}},
                      opset_version=17)
    model = onnx.load(tmp)
    entry = model.metadata_props.add()
    entry.key = "midsag.manifest"
    entry.value = json.dumps(man, indent=2)
    onnx.save(model, tmp)
    os.replace(tmp, args.out)
    # The reference output that models/demo's test checks ONNX Runtime against.
    gen = torch.Generator().manual_seed(1234)
    probe = torch.rand((1,) + tuple(x.shape[1:]), generator=gen)
    with torch.no_grad():
        ref = net(torch.cat([xt[:1], probe])).squeeze(1).tolist()
    np.concatenate([xt[:1].numpy(), probe.numpy()]).astype("<f4").tofile(
        os.path.join(os.path.dirname(args.out), "reference-input.f32"))
    digest = hashlib.sha256(open(args.out, "rb").read()).hexdigest()
    json.dump({"shape": [2] + list(x.shape[1:]), "torch_logits": ref, "torch_version": torch.__version__,
               "heldout_accuracy": acc, "heldout_studies": len(xt), "temperature": temp,
               "occlusion_augment": args.occlusion_augment, "sha256": digest},
              open(os.path.join(os.path.dirname(args.out), "reference.json"), "w"), indent=2)
    print("wrote", args.out, digest)


if __name__ == "__main__":
    main()
