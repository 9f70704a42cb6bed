"""Corpus of healthy trained models for the precision tests of vitals' checks.

Each model is a small version of something teams ship, trained briefly on real
or realistic data until it works (the held-out accuracy / IoU is printed and
recorded in index.json), and exported the way it would be shipped. vitals must
give no error and at most one warning on each (stats/corpus_test.go).

  resnet_folded   residual CNN on rendered shapes, exported in eval mode with
                  constant folding, so each BatchNorm is folded into its conv
  mobile_se       mobile CNN: 1x1 expand / depthwise / SE with HardSigmoid gate
                  / 1x1 project, hard-swish, on rendered shapes (BN folded)
  unet_pages      small U-Net segmenting ink on rendered pages of mostly white
                  paper, ImageNet-normalised input, sigmoid mask [N,1,H,W]
  vad_lstm        1-D conv front end on raw waveform in [-1, 1] at speech-like
                  amplitude, LSTM whose state is a model input, sigmoid head
  tabular_mlp     MLP on standardised breast-cancer features (sklearn) plus a
                  constant and a near-constant column, logits [N,2]
  digits_softmax  MLP classifier on sklearn's digits with a Softmax output

Writes testdata/corpus/<name>.onnx, the sample inputs (.npy, shared where
models share data), each model's torch output on the sample
(<name>.output.npy) and index.json. Run with Debian's python3-torch:

    /usr/bin/python3 testdata/gen/corpus.py
"""

import json
import math
import os
import random
from pathlib import Path

import numpy as np
import torch
import torch.nn as nn
import torch.nn.functional as F
from sklearn.datasets import load_breast_cancer, load_digits

REPO = Path(__file__).resolve().parents[2]
OUT = REPO / "testdata" / "corpus"
IMAGENET_MEAN = np.array([0.485, 0.456, 0.406], np.float32)  # published constants
IMAGENET_STD = np.array([0.229, 0.224, 0.225], np.float32)
SIDE = 24


def setup(seed):
    torch.set_num_threads(1)
    torch.manual_seed(seed)
    np.random.seed(seed)
    random.seed(seed)
    torch.use_deterministic_algorithms(True)


# ---------------------------------------------------------------- data


def render_shapes(n, rng):
    """Coloured discs, squares, triangles and crosses on a textured light
    background, RGB in [0,1], ImageNet-normalised; label = shape."""
    yy, xx = np.mgrid[0:SIDE, 0:SIDE].astype(np.float32)
    xs = np.zeros((n, 3, SIDE, SIDE), np.float32)
    ys = np.zeros(n, np.int64)
    for i in range(n):
        bg = rng.uniform(0.5, 0.95, 3).astype(np.float32)
        img = bg[:, None, None] + rng.normal(0, 0.03, (3, SIDE, SIDE)).astype(np.float32)
        k = rng.integers(4)
        cx, cy = rng.uniform(7, SIDE - 7, 2)
        r = rng.uniform(4, 7)
        if k == 0:
            m = (xx - cx) ** 2 + (yy - cy) ** 2 < r * r
        elif k == 1:
            m = (abs(xx - cx) < r * 0.8) & (abs(yy - cy) < r * 0.8)
        elif k == 2:
            m = (yy - cy > -r) & (yy - cy < r) & (abs(xx - cx) < (yy - cy + r) / 2)
        else:
            m = ((abs(xx - cx) < r) & (abs(yy - cy) < 1.5)) | ((abs(yy - cy) < r) & (abs(xx - cx) < 1.5))
        col = rng.uniform(0, 0.45, 3).astype(np.float32)
        img[:, m] = col[:, None]
        xs[i] = np.clip(img, 0, 1)
        ys[i] = k
    xs = (xs - IMAGENET_MEAN[None, :, None, None]) / IMAGENET_STD[None, :, None, None]
    return xs.astype(np.float32), ys


def render_pages(n, rng):
    """Pages of mostly white paper with dark text-like strokes (lines of short
    bars), ImageNet-normalised; the target is the ink mask [N,1,H,W]."""
    xs = np.zeros((n, 3, SIDE, SIDE), np.float32)
    ms = np.zeros((n, 1, SIDE, SIDE), np.float32)
    for i in range(n):
        paper = rng.uniform(0.9, 1.0)
        img = np.full((SIDE, SIDE), paper, np.float32) + rng.normal(0, 0.01, (SIDE, SIDE)).astype(np.float32)
        mask = np.zeros((SIDE, SIDE), bool)
        y = int(rng.integers(1, 5))
        while y < SIDE - 3:
            x = int(rng.integers(0, 4))
            while x < SIDE - 2:
                w = int(rng.integers(2, 6))
                h = int(rng.integers(2, 4))
                if rng.uniform() < 0.7:
                    mask[y:y + h, x:x + w] = True
                x += w + int(rng.integers(1, 3))
            y += int(rng.integers(5, 8))
        img[mask] = rng.uniform(0.05, 0.3)
        rgb = np.stack([img * rng.uniform(0.97, 1.0) for _ in range(3)])
        xs[i] = np.clip(rgb, 0, 1)
        ms[i, 0] = mask
    xs = (xs - IMAGENET_MEAN[None, :, None, None]) / IMAGENET_STD[None, :, None, None]
    return xs.astype(np.float32), ms


FRAME = 800  # 50 ms at 16 kHz


def synth_audio(n, rng):
    """Frames of raw waveform in [-1, 1]: voiced speech-like sound (a harmonic
    series on a 90-250 Hz fundamental with formant-shaped amplitudes and a
    syllable envelope) at speech amplitude (std ≈ 0.05), or background noise
    (pink-ish, std 0.002-0.02); label 1 = speech."""
    t = np.arange(FRAME, dtype=np.float64) / 16000
    xs = np.zeros((n, 1, FRAME), np.float32)
    ys = np.zeros((n, 1), np.float32)
    for i in range(n):
        noise = np.cumsum(rng.normal(0, 1, FRAME))
        noise = noise - np.convolve(noise, np.ones(32) / 32, mode="same")
        noise = noise / (noise.std() + 1e-9) * rng.uniform(0.002, 0.02)
        if rng.uniform() < 0.5:
            f0 = rng.uniform(90, 250)
            formants = rng.uniform([300, 900, 2200], [900, 2200, 3200])
            s = np.zeros(FRAME)
            for h in range(1, int(3800 / f0)):
                f = h * f0
                a = sum(math.exp(-((f - fm) / 150) ** 2) for fm in formants) + 0.05
                s += a * np.sin(2 * math.pi * f * t + rng.uniform(0, 2 * math.pi))
            env = 0.6 + 0.4 * np.sin(2 * math.pi * rng.uniform(3, 6) * t + rng.uniform(0, 6))
            s = s * env
            s = s / (s.std() + 1e-9) * rng.uniform(0.03, 0.08)
            xs[i, 0] = np.clip(s + noise, -1, 1)
            ys[i, 0] = 1
        else:
            xs[i, 0] = np.clip(noise, -1, 1)
    return xs, ys


# ---------------------------------------------------------------- models


class BasicBlock(nn.Module):
    def __init__(self, cin, cout, stride):
        super().__init__()
        self.c1 = nn.Conv2d(cin, cout, 3, stride, 1, bias=False)
        self.b1 = nn.BatchNorm2d(cout)
        self.c2 = nn.Conv2d(cout, cout, 3, 1, 1, bias=False)
        self.b2 = nn.BatchNorm2d(cout)
        self.short = None
        if stride != 1 or cin != cout:
            self.short = nn.Sequential(nn.Conv2d(cin, cout, 1, stride, bias=False), nn.BatchNorm2d(cout))

    def forward(self, x):
        y = F.relu(self.b1(self.c1(x)))
        y = self.b2(self.c2(y))
        return F.relu(y + (x if self.short is None else self.short(x)))


class ResNetTiny(nn.Module):
    def __init__(self, classes=4):
        super().__init__()
        self.stem = nn.Sequential(nn.Conv2d(3, 16, 3, 1, 1, bias=False), nn.BatchNorm2d(16), nn.ReLU())
        self.l1 = BasicBlock(16, 16, 1)
        self.l2 = BasicBlock(16, 32, 2)
        self.fc = nn.Linear(32, classes)

    def forward(self, x):
        x = self.l2(self.l1(self.stem(x)))
        return self.fc(x.mean((2, 3)))


class SE(nn.Module):
    def __init__(self, c, r=4):
        super().__init__()
        self.fc1 = nn.Conv2d(c, c // r, 1)
        self.fc2 = nn.Conv2d(c // r, c, 1)

    def forward(self, x):
        s = F.adaptive_avg_pool2d(x, 1)
        return x * F.hardsigmoid(self.fc2(F.relu(self.fc1(s))))


class InvRes(nn.Module):
    def __init__(self, cin, cout, expand, stride):
        super().__init__()
        mid = cin * expand
        self.expand = nn.Sequential(nn.Conv2d(cin, mid, 1, bias=False), nn.BatchNorm2d(mid), nn.Hardswish())
        self.dw = nn.Sequential(nn.Conv2d(mid, mid, 3, stride, 1, groups=mid, bias=False), nn.BatchNorm2d(mid), nn.Hardswish())
        self.se = SE(mid)
        self.project = nn.Sequential(nn.Conv2d(mid, cout, 1, bias=False), nn.BatchNorm2d(cout))
        self.res = stride == 1 and cin == cout

    def forward(self, x):
        y = self.project(self.se(self.dw(self.expand(x))))
        return x + y if self.res else y


class MobileSE(nn.Module):
    def __init__(self, classes=4):
        super().__init__()
        self.stem = nn.Sequential(nn.Conv2d(3, 16, 3, 2, 1, bias=False), nn.BatchNorm2d(16), nn.Hardswish())
        self.b1 = InvRes(16, 16, 2, 1)
        self.b2 = InvRes(16, 24, 3, 2)
        self.b3 = InvRes(24, 24, 3, 1)
        self.head = nn.Linear(24, classes)

    def forward(self, x):
        x = self.b3(self.b2(self.b1(self.stem(x))))
        return self.head(x.mean((2, 3)))


class UNetSmall(nn.Module):
    def __init__(self):
        super().__init__()

        def block(cin, cout):
            return nn.Sequential(nn.Conv2d(cin, cout, 3, 1, 1, bias=False), nn.BatchNorm2d(cout), nn.ReLU(),
                                 nn.Conv2d(cout, cout, 3, 1, 1, bias=False), nn.BatchNorm2d(cout), nn.ReLU())
        self.enc1 = block(3, 8)
        self.enc2 = block(8, 16)
        self.up = nn.ConvTranspose2d(16, 8, 2, 2)
        self.dec = block(16, 8)
        self.out = nn.Conv2d(8, 1, 1)

    def forward(self, x):
        e1 = self.enc1(x)
        e2 = self.enc2(F.max_pool2d(e1, 2))
        d = self.dec(torch.cat([self.up(e2), e1], 1))
        return torch.sigmoid(self.out(d))


class VAD(nn.Module):
    """Conv front end on raw waveform, LSTM with its state as an input
    (streaming use: the caller feeds the previous frame's state), sigmoid
    speech probability."""

    def __init__(self):
        super().__init__()
        self.front = nn.Sequential(nn.Conv1d(1, 16, 32, 8), nn.ReLU(), nn.Conv1d(16, 24, 8, 4), nn.ReLU())
        self.lstm = nn.LSTM(24, 24, batch_first=True)
        self.head = nn.Linear(24, 1)

    def forward(self, x, h, c):
        f = self.front(x).transpose(1, 2)
        y, (h2, c2) = self.lstm(f, (h.unsqueeze(0), c.unsqueeze(0)))
        return torch.sigmoid(self.head(y[:, -1])), h2.squeeze(0), c2.squeeze(0)


class TabularMLP(nn.Module):
    def __init__(self, fin):
        super().__init__()
        self.net = nn.Sequential(nn.Linear(fin, 32), nn.ReLU(), nn.Linear(32, 16), nn.ReLU(), nn.Linear(16, 2))

    def forward(self, x):
        return self.net(x)


class DigitsSoftmax(nn.Module):
    def __init__(self):
        super().__init__()
        self.net = nn.Sequential(nn.Linear(64, 64), nn.ReLU(), nn.Linear(64, 32), nn.ReLU(), nn.Linear(32, 10))

    def forward(self, x):
        return torch.softmax(self.net(x), dim=-1)


# ---------------------------------------------------------------- training


def fit(model, xs, ys, loss_fn, epochs, lr, batch=32, wd=0.0, extra=None):
    opt = torch.optim.Adam(model.parameters(), lr=lr, weight_decay=wd)
    n = xs[0].shape[0]
    for _ in range(epochs):
        model.train()
        perm = torch.randperm(n)
        for i in range(0, n, batch):
            idx = perm[i:i + batch]
            out = model(*[x[idx] for x in xs])
            if isinstance(out, tuple):
                out = out[0]
            loss = loss_fn(out, ys[idx])
            opt.zero_grad()
            loss.backward()
            opt.step()
    model.eval()


def export(model, args, names, path, opset, dynamic_names, output_names):
    model.eval()
    torch.onnx.export(model, args, str(path), opset_version=opset, input_names=names,
                      output_names=output_names, do_constant_folding=True,
                      training=torch.onnx.TrainingMode.EVAL,
                      dynamic_axes={k: {0: "n"} for k in dynamic_names})


def save(name, arr):
    np.save(OUT / name, arr)
    return name


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    entries = []
    rng = np.random.default_rng(15)

    # images: one training set, one committed sample shared by the two CNNs
    setup(1)
    xtr, ytr = render_shapes(2400, rng)
    xs, ys = render_shapes(128, rng)
    shapes_in = save("shapes_sample.npy", xs)
    save("shapes_labels.npy", ys)
    for name, model, opset, desc in [
        ("resnet_folded", ResNetTiny(), 13,
         "residual CNN (conv-BN-ReLU stem, two basic blocks, one with a 1x1 projection shortcut), BatchNorm folded into the convolutions at export, on rendered shapes, logits [N,4]"),
        ("mobile_se", MobileSE(), 17,
         "mobile CNN: 1x1 expand / depthwise 3x3 / squeeze-and-excitation with HardSigmoid gate / 1x1 project, hard-swish, residual adds, BatchNorm folded, on rendered shapes, logits [N,4]"),
    ]:
        setup(2)
        fit(model, [torch.from_numpy(xtr)], torch.from_numpy(ytr), nn.CrossEntropyLoss(), 6, 3e-3)
        with torch.no_grad():
            out = model(torch.from_numpy(xs))
        acc = float((out.argmax(1).numpy() == ys).mean())
        print(name, "held-out accuracy", acc)
        export(model, (torch.from_numpy(xs[:2]),), ["input"], OUT / (name + ".onnx"), opset, ["input", "output"], ["output"])
        save(name + ".output.npy", out.numpy())
        entries.append({"name": name, "description": desc, "model": name + ".onnx", "inputs": {"input": shapes_in},
                        "labels": "shapes_labels.npy", "output": name + ".output.npy", "quality": "held-out accuracy %.3f" % acc})

    # pages → ink mask
    setup(3)
    ptr, mtr = render_pages(1200, rng)
    ps, msk = render_pages(96, rng)
    pages_in = save("pages_sample.npy", ps)
    model = UNetSmall()
    fit(model, [torch.from_numpy(ptr)], torch.from_numpy(mtr), nn.BCELoss(), 8, 3e-3)
    with torch.no_grad():
        out = model(torch.from_numpy(ps))
    pred = out.numpy() > 0.5
    iou = float((pred & (msk > 0.5)).sum() / max(1, (pred | (msk > 0.5)).sum()))
    print("unet_pages held-out IoU", iou)
    export(model, (torch.from_numpy(ps[:2]),), ["input"], OUT / "unet_pages.onnx", 13, ["input", "output"], ["output"])
    save("unet_pages.output.npy", out.numpy())
    entries.append({"name": "unet_pages", "description": "small U-Net (two BN-ReLU encoder stages, transposed-conv upsampling, skip concat) segmenting ink on rendered pages of mostly white paper, ImageNet-normalised input (channel means ≈ 1.5-2), sigmoid mask output [N,1,24,24]",
                    "model": "unet_pages.onnx", "inputs": {"input": pages_in}, "output": "unet_pages.output.npy", "quality": "held-out IoU %.3f" % iou})

    # audio VAD with state inputs
    setup(4)
    atr, ltr = synth_audio(2000, rng)
    a_s, l_s = synth_audio(160, rng)
    model = VAD()
    h0 = torch.zeros(len(atr), 24)
    fit(model, [torch.from_numpy(atr), h0, h0.clone()], torch.from_numpy(ltr), nn.BCELoss(), 8, 3e-3)
    zs = np.zeros((len(a_s), 24), np.float32)
    with torch.no_grad():
        out = model(torch.from_numpy(a_s), torch.from_numpy(zs), torch.from_numpy(zs))[0]
    acc = float(((out.numpy() > 0.5) == (l_s > 0.5)).mean())
    print("vad_lstm held-out accuracy", acc, "sample std", float(a_s.std()))
    z2 = torch.zeros(2, 24)
    export(model, (torch.from_numpy(a_s[:2]), z2, z2), ["audio", "h", "c"], OUT / "vad_lstm.onnx", 13,
           ["audio", "h", "c", "speech", "h_out", "c_out"], ["speech", "h_out", "c_out"])
    save("vad_lstm.output.npy", out.numpy())
    entries.append({"name": "vad_lstm", "description": "voice-activity detector: 1-D conv front end (stride 8, then 4) on raw 50 ms waveform frames in [-1,1] at speech amplitude (sample std %.3f), LSTM whose state is a model input (fed zeros), sigmoid speech probability [N,1]" % float(a_s.std()),
                    "model": "vad_lstm.onnx", "inputs": {"audio": save("audio_sample.npy", a_s), "h": save("audio_state_zeros.npy", zs), "c": "audio_state_zeros.npy"},
                    "output": "vad_lstm.output.npy", "quality": "held-out accuracy %.3f" % acc})

    # tabular
    setup(5)
    bc = load_breast_cancer()
    x = bc.data.astype(np.float64)
    perm = np.random.default_rng(5).permutation(len(x))
    x, y = x[perm], bc.target[perm].astype(np.int64)
    x = (x - x[:400].mean(0)) / x[:400].std(0)
    const = np.zeros((len(x), 1))
    near = np.zeros((len(x), 1))
    near[[17, 123, 250, 377, 455]] = 1.0  # a rare flag (4 training rows, 1 sample row), standardised below
    near = (near - near[:400].mean()) / near[:400].std() if near[:400].std() > 0 else near
    x = np.concatenate([x, const, near], 1).astype(np.float32)
    model = TabularMLP(x.shape[1])
    fit(model, [torch.from_numpy(x[:400])], torch.from_numpy(y[:400]), nn.CrossEntropyLoss(), 40, 1e-3)
    with torch.no_grad():
        out = model(torch.from_numpy(x[400:]))
    acc = float((out.argmax(1).numpy() == y[400:]).mean())
    print("tabular_mlp held-out accuracy", acc)
    export(model, (torch.from_numpy(x[:2]),), ["features"], OUT / "tabular_mlp.onnx", 13, ["features", "output"], ["output"])
    save("tabular_mlp.output.npy", out.numpy())
    entries.append({"name": "tabular_mlp", "description": "MLP 32-32-16-2 on sklearn's breast-cancer features standardised on the training rows, plus a constant column and a near-constant (rare flag) column, logits [N,2]",
                    "model": "tabular_mlp.onnx", "inputs": {"features": save("tabular_sample.npy", x[400:])},
                    "labels": save("tabular_labels.npy", y[400:]), "output": "tabular_mlp.output.npy", "quality": "held-out accuracy %.3f" % acc})

    # digits with softmax output
    setup(6)
    d = load_digits()
    x = (d.data / 16.0).astype(np.float32)
    y = d.target.astype(np.int64)
    perm = np.random.default_rng(7).permutation(len(x))
    x, y = x[perm], y[perm]
    mu, sd = x[:1400].mean(0), x[:1400].std(0) + 1e-6
    x = ((x - mu) / sd).astype(np.float32)
    model = DigitsSoftmax()
    fit(model, [torch.from_numpy(x[:1400])], torch.from_numpy(y[:1400]),
        lambda p, t: F.nll_loss(torch.log(p + 1e-9), t), 20, 1e-3)
    with torch.no_grad():
        out = model(torch.from_numpy(x[1400:1656]))
    acc = float((out.argmax(1).numpy() == y[1400:1656]).mean())
    print("digits_softmax held-out accuracy", acc)
    export(model, (torch.from_numpy(x[:2]),), ["pixels"], OUT / "digits_softmax.onnx", 13, ["pixels", "output"], ["output"])
    save("digits_softmax.output.npy", out.numpy())
    entries.append({"name": "digits_softmax", "description": "MLP 64-64-32-10 on sklearn's digits (standardised pixels) with a Softmax output [N,10]",
                    "model": "digits_softmax.onnx", "inputs": {"pixels": save("digits_sample.npy", x[1400:1656])},
                    "labels": save("digits_labels.npy", y[1400:1656]), "output": "digits_softmax.output.npy", "quality": "held-out accuracy %.3f" % acc})

    with open(OUT / "index.json", "w") as f:
        json.dump({"description": "healthy trained models for vitals' precision tests; see testdata/gen/corpus.py",
                   "source": "torch %s" % torch.__version__, "models": entries}, f, indent=1)
        f.write("\n")


if __name__ == "__main__":
    main()
