"""Export the benchmark models to ONNX with random (He-initialised) weights.

Usage: /usr/bin/python3 bench/gen/export.py OUTDIR
Needs Debian's python3-torch and python3-torchvision. Writes resnet18.onnx,
mobilenet_v2.onnx, mlp.onnx, transformer.onnx (all with a symbolic batch
dimension) and, per model, a fixed float32 input sample NAME.npy drawn from
a seeded generator: 1,000 items for the CNNs and the encoder (the sample
size of a real check), 8192 for the MLP, whose items take 0.2 ms each.
"""
import os
import sys

import numpy as np
import torch
import torch.nn as nn
import torchvision

SAMPLES = {"resnet18": 1000, "mobilenet_v2": 1000, "mlp": 8192, "transformer": 1000}


class MLP(nn.Module):
    def __init__(self):
        super().__init__()
        dims = [784, 2048, 2048, 1024, 10]
        layers = []
        for i in range(4):
            layers.append(nn.Linear(dims[i], dims[i + 1]))
            if i < 3:
                layers.append(nn.ReLU())
        self.net = nn.Sequential(*layers)

    def forward(self, x):
        return self.net(x)


class Encoder(nn.Module):
    """Token embeddings in, 4 pre-norm-free post-LN encoder layers, mean-pooled logits."""

    def __init__(self, d=256, heads=4, ff=1024, layers=4, classes=10):
        super().__init__()
        layer = nn.TransformerEncoderLayer(d, heads, ff, dropout=0.0, activation="gelu", batch_first=True)
        self.enc = nn.TransformerEncoder(layer, layers, enable_nested_tensor=False)
        self.head = nn.Linear(d, classes)

    def forward(self, x):
        return self.head(self.enc(x).mean(dim=1))


def he_init(m):
    for mod in m.modules():
        if isinstance(mod, (nn.Conv2d, nn.Linear)):
            nn.init.kaiming_normal_(mod.weight, nonlinearity="relu")
            if mod.bias is not None:
                nn.init.zeros_(mod.bias)


def export(model, shape, name, out):
    torch.manual_seed(0)
    he_init(model)
    model.eval()
    g = torch.Generator().manual_seed(1)
    x = torch.randn(SAMPLES[name], *shape[1:], generator=g)
    path = os.path.join(out, name + ".onnx")
    # grad stays enabled: under no_grad the encoder takes a fused fast path
    # that has no ONNX export
    torch.onnx.export(model, x[: shape[0]], path, input_names=["input"], output_names=["output"],
                      dynamic_axes={"input": {0: "batch"}, "output": {0: "batch"}}, opset_version=17,
                      do_constant_folding=True)
    np.save(os.path.join(out, name + ".npy"), x.numpy().astype(np.float32))
    print("wrote", path)


def main():
    out = sys.argv[1]
    os.makedirs(out, exist_ok=True)
    torch.manual_seed(0)
    export(torchvision.models.resnet18(weights=None), (8, 3, 224, 224), "resnet18", out)
    export(torchvision.models.mobilenet_v2(weights=None), (8, 3, 224, 224), "mobilenet_v2", out)
    export(MLP(), (8, 784), "mlp", out)
    export(Encoder(), (8, 128, 256), "transformer", out)


if __name__ == "__main__":
    main()
