#!/usr/bin/python3
"""Small trained models that carry one known pathology each, for vitals' checks.

Data: scikit-learn's bundled copy of the UCI "Optical Recognition of Handwritten
Digits" data set (sklearn.datasets.load_digits: 1,797 images of 8x8 pixels with
values 0..16, ten classes; E. Alpaydin and C. Kaynak, UCI Machine Learning
Repository, 1998). It ships inside the python3-sklearn package, nothing is
downloaded.

Split: a seeded permutation; the first 512 images are the held-out sample that
every golden file is computed on, the remaining 1,285 are the training set.
Standardisation: per pixel, with the training set's mean and std (std 0 -> 1).

Writes into testdata/ref/:
  digits_sample.npy       [512,64]  float32, standardised (MLP input)
  digits_sample_nchw.npy  [512,1,8,8] float32, the same values as images (CNN input)
  digits_sample_raw.npy   [512,64]  float32, raw 0..16 pixel values (sigmoid net input)
  digits_labels.npy       [512]     int64
  <name>.onnx, <name>.output.npy (torch output on the sample), <name>.golden.json
for the models
  mlp_healthy        ReLU MLP 64-128-64-10, Adam lr 1e-3
  mlp_dead           the same MLP, Adam lr 5e-2: most of the second hidden layer dies
  sigmoid_saturated  sigmoid MLP 64-64-10 on raw 0..16 inputs, large initial weights
  zero_init          ReLU MLP 64-32-32-10 with all-zero weights (biases 0.1): units stay identical
  cnn_bn             conv-BN-ReLU x2, max pool, linear; trained properly
  cnn_bn_reset       cnn_bn with BatchNorm running statistics reset to mean 0, var 1
Run with Debian's python3-torch: /usr/bin/python3 testdata/gen/pathology_models.py
"""

import copy
import sys
from pathlib import Path

import numpy as np
import torch
import torch.nn as nn
from sklearn.datasets import load_digits

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402
from common import REF  # noqa: E402

OPSET = 13
SAMPLE = 512


def load_data():
    d = load_digits()
    x = d.data.astype(np.float32)
    y = d.target.astype(np.int64)
    perm = np.random.RandomState(20240).permutation(len(x))
    test, train = perm[:SAMPLE], perm[SAMPLE:]
    mu = x[train].mean(0)
    sd = x[train].std(0)
    sd[sd == 0] = 1.0
    xs = ((x - mu) / sd).astype(np.float32)
    return {
        "train_std": xs[train], "train_raw": x[train], "train_y": y[train],
        "test_std": xs[test], "test_raw": x[test], "test_y": y[test],
    }


class MLP(nn.Module):
    def __init__(self, sizes=(64, 128, 64, 10), act=nn.ReLU):
        super().__init__()
        self.depth = len(sizes) - 1
        for i in range(self.depth):
            setattr(self, "fc%d" % (i + 1), nn.Linear(sizes[i], sizes[i + 1]))
            if i < self.depth - 1:
                setattr(self, "act%d" % (i + 1), act())

    def forward(self, x):
        for i in range(self.depth):
            x = getattr(self, "fc%d" % (i + 1))(x)
            if i < self.depth - 1:
                x = getattr(self, "act%d" % (i + 1))(x)
        return x


class SmallCNN(nn.Module):
    def __init__(self):
        super().__init__()
        self.conv1 = nn.Conv2d(1, 8, 3, padding=1)
        self.bn1 = nn.BatchNorm2d(8)
        self.relu1 = nn.ReLU()
        self.conv2 = nn.Conv2d(8, 16, 3, padding=1)
        self.bn2 = nn.BatchNorm2d(16)
        self.relu2 = nn.ReLU()
        self.pool = nn.MaxPool2d(2)
        self.fc = nn.Linear(16 * 4 * 4, 10)

    def forward(self, x):
        x = self.relu1(self.bn1(self.conv1(x)))
        x = self.pool(self.relu2(self.bn2(self.conv2(x))))
        return self.fc(torch.flatten(x, 1))


def train(model, x, y, opt, epochs, seed, batch=64):
    g = torch.Generator().manual_seed(seed)
    xt, yt = torch.tensor(x), torch.tensor(y)
    model.train()
    for _ in range(epochs):
        perm = torch.randperm(len(xt), generator=g)
        for i in range(0, len(perm), batch):
            b = perm[i:i + batch]
            opt.zero_grad()
            loss = nn.functional.cross_entropy(model(xt[b]), yt[b])
            loss.backward()
            opt.step()
    model.eval()
    return model


def accuracy(model, x, y):
    with torch.no_grad():
        return float((model(torch.tensor(x)).argmax(1).numpy() == y).mean())


def build(name, data, seed):
    common.setup(seed)
    tr_y = data["train_y"]
    if name in ("mlp_healthy", "mlp_dead"):
        m = MLP()
        lr = 1e-3 if name == "mlp_healthy" else 5e-2
        train(m, data["train_std"], tr_y, torch.optim.Adam(m.parameters(), lr=lr), 20, seed)
        return m, "std", {"optimizer": "Adam", "lr": lr, "epochs": 20, "batch": 64}
    if name == "sigmoid_saturated":
        m = MLP((64, 64, 10), act=nn.Sigmoid)
        with torch.no_grad():
            # a scale no initialisation rule would give, on unnormalised 0..16 inputs
            m.fc1.weight.normal_(0.0, 1.0)
            m.fc1.bias.normal_(0.0, 1.0)
        train(m, data["train_raw"], tr_y, torch.optim.SGD(m.parameters(), lr=0.05), 10, seed)
        return m, "raw", {"optimizer": "SGD", "lr": 0.05, "epochs": 10, "batch": 64,
                          "init": "fc1 weights and bias N(0,1)"}
    if name == "zero_init":
        m = MLP((64, 32, 32, 10))
        with torch.no_grad():
            for fc in (m.fc1, m.fc2, m.fc3):
                fc.weight.zero_()
                fc.bias.fill_(0.1)
        # Trained in float64 and cast to float32: in float32 the BLAS kernels'
        # blocking makes mathematically identical rows differ in the last bits,
        # which would blur the point of this model (exactly identical units).
        m.double()
        train(m, data["train_std"].astype(np.float64), tr_y,
              torch.optim.Adam(m.parameters(), lr=1e-2), 20, seed)
        m.float()
        return m, "std", {"optimizer": "Adam", "lr": 1e-2, "epochs": 20, "batch": 64, "dtype": "float64, cast to float32",
                          "init": "all weights 0, all biases 0.1"}
    if name == "cnn_bn":
        m = SmallCNN()
        x = data["train_std"].reshape(-1, 1, 8, 8)
        train(m, x, tr_y, torch.optim.Adam(m.parameters(), lr=3e-3), 15, seed)
        return m, "nchw", {"optimizer": "Adam", "lr": 3e-3, "epochs": 15, "batch": 64}
    raise KeyError(name)


def main():
    REF.mkdir(parents=True, exist_ok=True)
    data = load_data()
    samples = {
        "std": data["test_std"],
        "nchw": data["test_std"].reshape(-1, 1, 8, 8).copy(),
        "raw": data["test_raw"],
    }
    files = {"std": "digits_sample.npy", "nchw": "digits_sample_nchw.npy", "raw": "digits_sample_raw.npy"}
    for k, f in files.items():
        np.save(REF / f, samples[k].astype(np.float32))
    np.save(REF / "digits_labels.npy", data["test_y"].astype(np.int64))

    models = {}
    specs = [
        ("mlp_healthy", 11, "ReLU MLP 64-128-64-10 on standardised digits, Adam lr 1e-3, 20 epochs"),
        ("mlp_dead", 11, "the same ReLU MLP trained with Adam lr 5e-2 (too high): most units of the "
                         "second hidden layer never fire"),
        ("sigmoid_saturated", 12, "sigmoid MLP 64-64-10 fed raw 0..16 pixels with N(0,1) first-layer "
                                  "weights: the hidden sigmoid is pinned at 0 or 1"),
        ("zero_init", 13, "ReLU MLP 64-32-32-10 initialised with all-zero weights (biases 0.1), Adam lr 1e-2: "
                          "hidden units never break symmetry, weight rows stay identical"),
        ("cnn_bn", 14, "CNN conv(1-8)-BN-ReLU-conv(8-16)-BN-ReLU-maxpool-linear on [N,1,8,8] "
                       "standardised digits, Adam lr 3e-3, 15 epochs"),
        ("cnn_bn_reset", 14, "cnn_bn with every BatchNorm running_mean set to 0 and running_var to 1 "
                             "after training"),
    ]
    index = []
    for name, seed, desc in specs:
        if name == "cnn_bn_reset":
            common.setup(seed)
            m = copy.deepcopy(models["cnn_bn"][0])
            with torch.no_grad():
                for bn in (m.bn1, m.bn2):
                    bn.running_mean.zero_()
                    bn.running_var.fill_(1.0)
            kind, train_info = "nchw", dict(models["cnn_bn"][2], note="running stats reset after training")
        else:
            m, kind, train_info = build(name, data, seed)
        models[name] = (m, kind, train_info)
        x = torch.tensor(samples[kind])
        onnx_model, mapping, captured, final = common.export_and_map(
            m, x, OPSET, REF / (name + ".onnx"), constant_folding=False)
        mods = dict(m.named_modules())
        layers = common.build_layers(onnx_model, mapping, captured, mods, common.default_unit_axis())
        bn_names = [n for n, mm in mods.items() if isinstance(mm, nn.BatchNorm2d)]
        bn = common.batchnorm_records(m, common.capture_inputs(m, bn_names, x), mapping)
        weights = common.build_weights(onnx_model, m)
        out = final.numpy().astype(np.float32)
        np.save(REF / (name + ".output.npy"), out)
        acc = float((out.argmax(1) == data["test_y"]).mean())
        pathology = expected_pathology(name, layers, weights, bn)
        g = common.golden(name, onnx_model, m, samples[kind], final, layers, weights,
                          input_file=files[kind], extra={
                              "description": desc,
                              "labels": "digits_labels.npy",
                              "accuracy_on_sample": acc,
                              "training": train_info,
                              "data": "UCI optical recognition of handwritten digits (sklearn.datasets.load_digits), "
                                      "512 held-out images",
                              "export": {"do_constant_folding": False, "training": "PRESERVE (model in eval mode)",
                                         "dynamic_axes": {"input": {"0": "N"}, "output": {"0": "N"}}},
                              "batchnorm": bn,
                              "pathology": pathology,
                          })
        assert g["opset"] == OPSET
        common.write_json(REF / (name + ".golden.json"), g)
        index.append({
            "name": name, "kind": "pathology", "architecture": desc, "opset": OPSET,
            "files": {"model": name + ".onnx", "input": files[kind], "labels": "digits_labels.npy",
                      "output": name + ".output.npy", "golden": name + ".golden.json"},
            "input_name": g["input_name"], "input_dtype": g["input_dtype"], "input_shape": g["input_shape"],
            "op_types": g["op_types"], "accuracy_on_sample": acc, "pathology": pathology,
        })
        summary = ", ".join("%s dead %.3f" % (l["onnx_node"], l["dead_fraction"])
                            for l in layers if l["dead_fraction"] is not None)
        summary += ", ".join(" %s saturated %.3f" % (l["onnx_node"], l["saturated_fraction"])
                             for l in layers if l["saturated_fraction"] is not None)
        print("%-18s acc %.3f  %s  | %s" % (name, acc, summary, pathology))
    common.update_index(index, "pathology")


def expected_pathology(name, layers, weights, bn):
    by_module = {l["module"]: l for l in layers}
    if name == "mlp_dead":
        worst = max((l for l in layers if l["dead_fraction"] is not None), key=lambda l: l["dead_fraction"])
        assert worst["dead_fraction"] >= 0.4, worst
        return {"check": "dead-units", "node": worst["onnx_node"], "value": worst["dead_fraction"],
                "per_node": {l["onnx_node"]: l["dead_fraction"] for l in layers if l["dead_fraction"] is not None}}
    if name == "sigmoid_saturated":
        l = by_module["act1"]
        assert l["saturated_fraction"] >= 0.5, l
        return {"check": "saturation", "node": l["onnx_node"], "value": l["saturated_fraction"]}
    if name == "zero_init":
        w = [w for w in weights if w["module"] == "fc1"][0]
        assert w["identical_rows"] == w["rows"] and w["zero_rows"] == 0, w
        others = [x["node"] for x in weights if x["module"] != "fc1" and x["identical_rows"] >= 2]
        return {"check": "symmetric-units", "node": w["node"], "initializer": w["onnx_initializer"],
                "value": {"rows": w["rows"], "identical_rows": w["identical_rows"],
                          "distinct_rows": w["distinct_rows"]},
                "also_nodes": others}
    if name == "cnn_bn_reset":
        drifted = [b for b in bn if b["drifted_channels"] > 0]
        assert drifted, bn
        worst = max(drifted, key=lambda b: b["drifted_channels"] / b["channels"])
        return {"check": "batchnorm-drift", "node": worst["onnx_node"],
                "value": {"drifted_channels": worst["drifted_channels"], "channels": worst["channels"],
                          "max_abs_mean_shift_over_running_std": worst["max_abs_mean_shift_over_running_std"],
                          "var_ratio_min": worst["var_ratio_min"], "var_ratio_max": worst["var_ratio_max"]},
                "also_nodes": [b["onnx_node"] for b in drifted if b is not worst]}
    return {"check": None, "node": None}


if __name__ == "__main__":
    main()
