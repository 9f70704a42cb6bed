"""Export the benchmark models to ONNX with random (He-initialised) weights.

Usage: /usr/bin/python3 bench/gen/export.py OUTDIR
       /usr/bin/python3 bench/gen/export.py --breadth OUTDIR [NAME ...]
Needs Debian's python3-torch and python3-torchvision. Writes resnet18.onnx,
mobilenet_v2.onnx, mlp.onnx, transformer.onnx (all with a symbolic batch
dimension) and, per model, a fixed float32 input sample NAME.npy drawn from
a seeded generator: 1,000 items for the CNNs and the encoder (the sample
size of a real check), 8192 for the MLP, whose items take 0.2 ms each.

--breadth writes the architectures of bench/breadth.sh (torchvision 0.14
constructors, untrained weights as constructed: speed does not depend on
training) with BREADTH_ITEMS seeded Gaussian items each, 224×224 but for
SSDLite (320×320 uniform [0, 1] images, one per run, no batch axis:
torchvision's detection models take a list of images; its convolutions
He-initialised so that the detection scores differ). All exist in torchvision 0.14, ConvNeXt-Tiny
and Swin-T included.
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


BREADTH_ITEMS = 40


def breadth_models():
    """name -> (constructor, input shape of one item, batch axis?)"""
    tm = torchvision.models
    return {
        "efficientnet_b0": (lambda: tm.efficientnet_b0(weights=None), (3, 224, 224), True),
        "mobilenet_v3_large": (lambda: tm.mobilenet_v3_large(weights=None), (3, 224, 224), True),
        "mnasnet1_0": (lambda: tm.mnasnet1_0(weights=None), (3, 224, 224), True),
        "deeplabv3_mobilenet_v3": (lambda: tm.segmentation.deeplabv3_mobilenet_v3_large(
            weights=None, weights_backbone=None, aux_loss=False), (3, 224, 224), True),
        "regnet_y_800mf": (lambda: tm.regnet_y_800mf(weights=None), (3, 224, 224), True),
        "densenet121": (lambda: tm.densenet121(weights=None), (3, 224, 224), True),
        "convnext_tiny": (lambda: tm.convnext_tiny(weights=None), (3, 224, 224), True),
        "swin_t": (lambda: tm.swin_t(weights=None), (3, 224, 224), True),
        "googlenet": (lambda: tm.googlenet(weights=None, aux_logits=False, init_weights=True), (3, 224, 224), True),
        "inception_v3": (lambda: tm.inception_v3(weights=None, aux_logits=False, init_weights=True), (3, 224, 224), True),
        "resnet50": (lambda: tm.resnet50(weights=None), (3, 224, 224), True),
        "ssdlite": (lambda: tm.detection.ssdlite320_mobilenet_v3_large(
            weights=None, weights_backbone=None), (3, 320, 320), False),
    }


class DeepLabOut(nn.Module):
    """DeepLabV3 returns a dict; export its "out" tensor."""

    def __init__(self, m):
        super().__init__()
        self.m = m

    def forward(self, x):
        return self.m(x)["out"]


class DetectOut(nn.Module):
    """One image in (no batch axis), the boxes, scores and labels out."""

    def __init__(self, m):
        super().__init__()
        self.m = m

    def forward(self, x):
        d = self.m([x])[0]
        return d["boxes"], d["scores"], d["labels"]


def breadth(out, names):
    os.makedirs(out, exist_ok=True)
    models = breadth_models()
    for name in names or list(models):
        make, shape, batched = models[name]
        torch.manual_seed(0)
        model = make()
        if name.startswith("deeplab"):
            model = DeepLabOut(model)
        if not batched:
            # He-initialised convolutions keep the activations' scale through
            # the untrained backbone, so that scores differ and NMS has work
            he_init(model)
            model = DetectOut(model)
        model.eval()
        g = torch.Generator().manual_seed(1)
        x = torch.randn(BREADTH_ITEMS, *shape, generator=g)
        if not batched:
            # detection wants image-like values: uniform in [0, 1]
            x = torch.rand(BREADTH_ITEMS, *shape, generator=g)
        path = os.path.join(out, name + ".onnx")
        with torch.no_grad():
            if batched:
                torch.onnx.export(model, x[:8], path, input_names=["input"], output_names=["output"],
                                  dynamic_axes={"input": {0: "batch"}, "output": {0: "batch"}},
                                  opset_version=17, do_constant_folding=True)
            else:
                torch.onnx.export(model, x[0], path, input_names=["input"],
                                  output_names=["boxes", "scores", "labels"], opset_version=17,
                                  do_constant_folding=True)
        np.save(os.path.join(out, name + ".npy"), x.numpy().astype(np.float32))
        print("wrote", path, flush=True)


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--breadth":
        breadth(sys.argv[2], sys.argv[3:])
    else:
        main()
