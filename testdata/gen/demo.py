#!/usr/bin/python3
"""Demo data for vitals: two checkpoints of one spindle-condition classifier.

Fictional scenario (invented for this demo): a small machining workshop logs a
vibration summary from an accelerometer on each milling machine's spindle
housing once per cut. Each reading has 8 features for each of the 3 axes
(x, y, z): RMS, peak, crest factor, kurtosis, energy in a low, mid and high
frequency band, and the amplitude at the spindle's rotation frequency. A model
sorts readings into 4 conditions: normal, worn tool, loose clamp, misaligned
spindle. The data are synthetic, drawn from a hand-made generative model below.

The same MLP (24-64-64-32-4, ReLU) is trained twice on the same data:
  spindle-healthy.onnx     Adam, lr 1e-3
  spindle-overdriven.onnx  Adam, lr 3e-2: many hidden units die (same accuracy)
Writes into testdata/demo/: the two models, readings.npy (float32 [N,24],
standardised with the training set's statistics, as the models expect),
readings.csv (the same values with a header), conditions.npy (int64 labels),
expected.json (what torch measured on the sample).
Run with Debian's python3-torch: /usr/bin/python3 testdata/gen/demo.py
"""

import sys
from pathlib import Path

import numpy as np
import torch
import torch.nn as nn

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402
from common import DEMO  # noqa: E402

CONDITIONS = ["normal", "worn_tool", "loose_clamp", "misaligned_spindle"]
AXES = ["x", "y", "z"]
FEATURES = ["rms", "peak", "crest", "kurtosis", "band_low", "band_mid", "band_high", "rot_1x"]
COLUMNS = ["%s_%s" % (f, a) for a in AXES for f in FEATURES]
OPSET = 13
N_TRAIN, N_SAMPLE = 6000, 2000


def synthesise(n, rng):
    """Readings from a simple physical caricature of a milling spindle."""
    cond = rng.integers(0, 4, n)
    rpm = rng.uniform(6000, 18000, n)               # spindle speed
    load = rng.uniform(0.3, 1.0, n)                  # cutting load (feed x depth)
    tool_age = rng.uniform(0, 1, n)                  # fraction of tool life used
    axis_gain = np.array([1.0, 0.9, 0.6])            # z is stiffer
    X = np.zeros((n, 24))
    for a in range(3):
        base = 0.2 + 0.5 * load * (rpm / 12000) ** 0.5
        low = 0.3 * load + 0.05 * rng.standard_normal(n)
        mid = 0.4 * load * rpm / 12000 + 0.05 * rng.standard_normal(n)
        high = 0.1 + 0.15 * tool_age + 0.05 * rng.standard_normal(n)
        rot = 0.05 + 0.02 * rng.standard_normal(n)
        kurt = 3.0 + 0.3 * rng.standard_normal(n)
        # condition effects
        worn = cond == 1
        high = high + worn * (0.12 + 0.1 * tool_age) * (1.0 if a < 2 else 0.5)
        kurt = kurt + worn * 0.5
        loose = cond == 2
        low = low + loose * (0.16 if a == 2 else 0.06)
        kurt = kurt + loose * rng.gamma(1.0, 0.8, n)     # intermittent knocks
        mis = cond == 3
        rot = rot + mis * (0.04 + 0.05 * rpm / 18000) * (1.0 if a < 2 else 0.3)
        low, mid, high = np.abs(low), np.abs(mid), np.abs(high)
        rms = axis_gain[a] * np.sqrt(base ** 2 + low ** 2 + mid ** 2 + high ** 2 + rot ** 2)
        rms *= np.exp(0.08 * rng.standard_normal(n))
        crest = np.sqrt(np.maximum(kurt, 1.0)) * (1.0 + 0.1 * rng.standard_normal(n))
        peak = rms * crest
        X[:, a * 8:(a + 1) * 8] = np.stack(
            [rms, peak, crest, kurt, low * axis_gain[a], mid * axis_gain[a], high * axis_gain[a], rot], 1)
    return X, cond.astype(np.int64)


class SpindleNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.fc1 = nn.Linear(24, 64)
        self.relu1 = nn.ReLU()
        self.fc2 = nn.Linear(64, 64)
        self.relu2 = nn.ReLU()
        self.fc3 = nn.Linear(64, 32)
        self.relu3 = nn.ReLU()
        self.out = nn.Linear(32, 4)

    def forward(self, x):
        return self.out(self.relu3(self.fc3(self.relu2(self.fc2(self.relu1(self.fc1(x)))))))


def train(model, x, y, lr, epochs, seed):
    g = torch.Generator().manual_seed(seed)
    opt = torch.optim.Adam(model.parameters(), lr=lr)
    xt, yt = torch.tensor(x), torch.tensor(y)
    model.train()
    for _ in range(epochs):
        perm = torch.randperm(len(xt), generator=g)
        for i in range(0, len(perm), 64):
            b = perm[i:i + 64]
            opt.zero_grad()
            nn.functional.cross_entropy(model(xt[b]), yt[b]).backward()
            opt.step()
    model.eval()
    return model


def main():
    DEMO.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(7)
    X, y = synthesise(N_TRAIN + N_SAMPLE, rng)
    Xtr, ytr, Xs, ys = X[:N_TRAIN], y[:N_TRAIN], X[N_TRAIN:], y[N_TRAIN:]
    mu, sd = Xtr.mean(0), Xtr.std(0)
    Xtr = ((Xtr - mu) / sd).astype(np.float32)
    Xs = ((Xs - mu) / sd).astype(np.float32)
    np.save(DEMO / "readings.npy", Xs)
    np.save(DEMO / "conditions.npy", ys)
    with open(DEMO / "readings.csv", "w") as f:
        f.write(",".join(COLUMNS) + "\n")
        for row in Xs:
            f.write(",".join("%.9g" % v for v in row) + "\n")  # 9 digits: exact float32
    # the csv must round-trip to the same float32 values as the npy
    back = np.loadtxt(DEMO / "readings.csv", delimiter=",", skiprows=1, dtype=np.float64).astype(np.float32)
    csv_max_abs_diff = float(np.abs(back - Xs).max())
    assert csv_max_abs_diff == 0.0, csv_max_abs_diff

    expected = {"scenario": "fictional milling-spindle vibration classifier (synthetic data)",
                "source": common.SOURCE, "sample": "readings.npy", "labels": "conditions.npy",
                "columns": COLUMNS, "classes": CONDITIONS,
                "standardisation": {"mean": [float(v) for v in mu], "std": [float(v) for v in sd]},
                "csv_max_abs_diff_vs_npy": csv_max_abs_diff, "models": {}}
    for name, lr, seed in (("spindle-healthy", 1e-3, 31), ("spindle-overdriven", 3e-2, 31)):
        common.setup(seed)
        m = train(SpindleNet(), Xtr, ytr, lr, 25, seed)
        x = torch.tensor(Xs)
        onnx_model, mapping, captured, final = common.export_and_map(
            m, x, OPSET, DEMO / (name + ".onnx"), constant_folding=True)
        layers = common.build_layers(onnx_model, mapping, captured, dict(m.named_modules()),
                                     common.default_unit_axis())
        acc = float((final.numpy().argmax(1) == ys).mean())
        dead = {l["onnx_node"]: l["dead_fraction"] for l in layers if l["dead_fraction"] is not None}
        expected["models"][name + ".onnx"] = {
            "opset": common.model_opset(onnx_model), "op_types": common.op_types(onnx_model),
            "training": {"optimizer": "Adam", "lr": lr, "epochs": 25, "batch": 64},
            "accuracy_on_sample": acc, "dead_fraction": dead,
            "layers": [{k: l[k] for k in ("module", "onnx_node", "op", "mean", "std", "min", "max",
                                          "dead_fraction")} for l in layers],
            "weights": [{k: w[k] for k in ("module", "onnx_initializer", "onnx_layout", "node", "shape",
                                           "std", "gain")} for w in common.build_weights(onnx_model, m)],
        }
        print("%-20s acc %.3f dead %s" % (name, acc, {k: round(v, 3) for k, v in dead.items()}))
    od = expected["models"]["spindle-overdriven.onnx"]["dead_fraction"]
    assert max(od.values()) >= 0.3, od
    hd = expected["models"]["spindle-healthy.onnx"]["dead_fraction"]
    assert max(hd.values()) < 0.25, hd
    common.write_json(DEMO / "expected.json", expected)


if __name__ == "__main__":
    main()
