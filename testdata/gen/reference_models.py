#!/usr/bin/python3
"""Reference models for vitals' executor and statistics tests.

Writes, for each architecture below, into testdata/ref/:
  <name>.onnx         the model as torch.onnx.export writes it (eval mode)
  <name>.input.npy    a fixed input batch (float32, or int64 token ids)
  <name>.output.npy   torch's own output on that input (float32)
  <name>.golden.json  per-layer statistics from torch forward hooks, mapped to
                      the ONNX node that produces each hooked module's output

The weights are torch's default initialisation under a fixed seed (untrained);
BatchNorm layers get non-trivial affine parameters and running statistics (a
few train-mode passes over seeded noise) so that inference-mode BatchNorm is
exercised with values other than 0/1. Every model is tiny on purpose.
Run with Debian's python3-torch: /usr/bin/python3 testdata/gen/reference_models.py
"""

import sys
from pathlib import Path

import numpy as np
import onnx
import torch
import torch.nn as nn

sys.path.insert(0, str(Path(__file__).resolve().parent))
import common  # noqa: E402
from common import REF  # noqa: E402

BATCH = 3


def conv_bn(cin, cout, k=3, stride=1, groups=1, act=None):
    layers = [nn.Conv2d(cin, cout, k, stride, k // 2, groups=groups, bias=False), nn.BatchNorm2d(cout)]
    if act is not None:
        layers.append(act())
    return nn.Sequential(*layers)


# ---------------------------------------------------------------- residual CNN
class BasicBlock(nn.Module):
    def __init__(self, cin, cout, stride):
        super().__init__()
        self.conv1 = nn.Conv2d(cin, cout, 3, stride, 1, bias=False)
        self.bn1 = nn.BatchNorm2d(cout)
        self.relu1 = nn.ReLU()
        self.conv2 = nn.Conv2d(cout, cout, 3, 1, 1, bias=False)
        self.bn2 = nn.BatchNorm2d(cout)
        self.down = None
        if stride != 1 or cin != cout:
            self.down = nn.Sequential(nn.Conv2d(cin, cout, 1, stride, bias=False), nn.BatchNorm2d(cout))
        self.relu2 = nn.ReLU()

    def forward(self, x):
        y = self.bn2(self.conv2(self.relu1(self.bn1(self.conv1(x)))))
        s = x if self.down is None else self.down(x)
        return self.relu2(y + s)


class ResNetTiny(nn.Module):
    def __init__(self, classes=10):
        super().__init__()
        self.stem = conv_bn(3, 16, act=nn.ReLU)
        self.layer1 = BasicBlock(16, 16, 1)
        self.layer2 = BasicBlock(16, 32, 2)
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(32, classes)

    def forward(self, x):
        x = self.layer2(self.layer1(self.stem(x)))
        return self.fc(torch.flatten(self.pool(x), 1))


# ------------------------------------------- inverted-residual mobile CNN (Hardswish)
class SqueezeExcite(nn.Module):
    def __init__(self, c, r=4):
        super().__init__()
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.reduce = nn.Conv2d(c, c // r, 1)
        self.relu = nn.ReLU()
        self.expand = nn.Conv2d(c // r, c, 1)
        self.gate = nn.Hardsigmoid()

    def forward(self, x):
        return x * self.gate(self.expand(self.relu(self.reduce(self.pool(x)))))


class InvertedResidual(nn.Module):
    def __init__(self, cin, cexp, cout, stride, se):
        super().__init__()
        self.expand = conv_bn(cin, cexp, 1, act=nn.Hardswish)
        self.depthwise = conv_bn(cexp, cexp, 3, stride, groups=cexp, act=nn.Hardswish)
        self.se = SqueezeExcite(cexp) if se else None
        self.project = conv_bn(cexp, cout, 1)
        self.residual = stride == 1 and cin == cout

    def forward(self, x):
        y = self.depthwise(self.expand(x))
        if self.se is not None:
            y = self.se(y)
        y = self.project(y)
        return x + y if self.residual else y


class MobileTiny(nn.Module):
    def __init__(self, classes=10):
        super().__init__()
        self.stem = conv_bn(3, 16, 3, 2, act=nn.Hardswish)
        self.blocks = nn.Sequential(
            InvertedResidual(16, 32, 16, 1, se=False),
            InvertedResidual(16, 48, 24, 2, se=True),
            InvertedResidual(24, 64, 24, 1, se=True),
        )
        self.head = conv_bn(24, 32, 1, act=nn.Hardswish)
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.classifier = nn.Sequential(nn.Linear(32, 32), nn.Hardswish(), nn.Linear(32, classes))

    def forward(self, x):
        x = self.pool(self.head(self.blocks(self.stem(x))))
        return self.classifier(torch.flatten(x, 1))


# ------------------------------------------- depthwise-separable net with SiLU
class DWSeparable(nn.Module):
    def __init__(self, cin, cout, stride):
        super().__init__()
        self.dw = nn.Conv2d(cin, cin, 3, stride, 1, groups=cin)
        self.dw_act = nn.SiLU()
        self.pw = nn.Conv2d(cin, cout, 1)
        self.pw_act = nn.SiLU()

    def forward(self, x):
        return self.pw_act(self.pw(self.dw_act(self.dw(x))))


class DWSepSiLU(nn.Module):
    def __init__(self, classes=10):
        super().__init__()
        self.stem = nn.Conv2d(3, 16, 3, 1, 1)
        self.stem_act = nn.SiLU()
        self.body = nn.Sequential(DWSeparable(16, 24, 2), DWSeparable(24, 32, 2), DWSeparable(32, 32, 1))
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(32, classes)

    def forward(self, x):
        x = self.body(self.stem_act(self.stem(x)))
        return self.fc(torch.flatten(self.pool(x), 1))


# ------------------------------------------- densely connected CNN
class DenseLayer(nn.Module):
    def __init__(self, cin, growth):
        super().__init__()
        self.bn = nn.BatchNorm2d(cin)
        self.relu = nn.ReLU()
        self.conv = nn.Conv2d(cin, growth, 3, 1, 1, bias=False)

    def forward(self, x):
        return torch.cat([x, self.conv(self.relu(self.bn(x)))], 1)


class Transition(nn.Module):
    def __init__(self, cin, cout):
        super().__init__()
        self.bn = nn.BatchNorm2d(cin)
        self.relu = nn.ReLU()
        self.conv = nn.Conv2d(cin, cout, 1, bias=False)
        self.pool = nn.AvgPool2d(2)

    def forward(self, x):
        return self.pool(self.conv(self.relu(self.bn(x))))


class DenseTiny(nn.Module):
    def __init__(self, classes=10, growth=8):
        super().__init__()
        self.stem = nn.Conv2d(3, 16, 3, 1, 1, bias=False)
        self.block1 = nn.Sequential(DenseLayer(16, growth), DenseLayer(24, growth), DenseLayer(32, growth))
        self.trans1 = Transition(40, 20)
        self.block2 = nn.Sequential(DenseLayer(20, growth), DenseLayer(28, growth))
        self.norm = nn.BatchNorm2d(36)
        self.relu = nn.ReLU()
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(36, classes)

    def forward(self, x):
        x = self.block2(self.trans1(self.block1(self.stem(x))))
        return self.fc(torch.flatten(self.pool(self.relu(self.norm(x))), 1))


# ------------------------------------------- VGG-style with unfused BatchNorm
class VGGBN(nn.Module):
    def __init__(self, classes=10):
        super().__init__()
        cfg = [8, 8, "M", 16, 16, "M", 32, "M"]
        layers, c = [], 3
        for v in cfg:
            if v == "M":
                layers.append(nn.MaxPool2d(2))
            else:
                layers += [nn.Conv2d(c, v, 3, padding=1), nn.BatchNorm2d(v), nn.ReLU()]
                c = v
        self.features = nn.Sequential(*layers)
        self.classifier = nn.Sequential(nn.Linear(32 * 4 * 4, 32), nn.ReLU(), nn.Linear(32, classes))

    def forward(self, x):
        return self.classifier(torch.flatten(self.features(x), 1))


# ------------------------------------------- small vision transformer
class Attention(nn.Module):
    def __init__(self, dim, heads, tokens):
        super().__init__()
        self.heads, self.tokens, self.dim = heads, tokens, dim
        self.head_dim = dim // heads
        self.scale = self.head_dim ** -0.5
        self.q = nn.Linear(dim, dim)
        self.k = nn.Linear(dim, dim)
        self.v = nn.Linear(dim, dim)
        self.softmax = nn.Softmax(dim=-1)
        self.proj = nn.Linear(dim, dim)

    def split(self, t):
        # constant sizes (with -1 for the batch) keep the exported Reshape simple
        return t.reshape(-1, self.tokens, self.heads, self.head_dim).transpose(1, 2)

    def forward(self, x):
        q, k, v = self.split(self.q(x)), self.split(self.k(x)), self.split(self.v(x))
        att = self.softmax(torch.matmul(q, k.transpose(-2, -1)) * self.scale)
        y = torch.matmul(att, v).transpose(1, 2).reshape(-1, self.tokens, self.dim)
        return self.proj(y)


class EncoderBlock(nn.Module):
    def __init__(self, dim, heads, tokens, hidden):
        super().__init__()
        self.norm1 = nn.LayerNorm(dim)
        self.attn = Attention(dim, heads, tokens)
        self.norm2 = nn.LayerNorm(dim)
        self.fc1 = nn.Linear(dim, hidden)
        self.gelu = nn.GELU()
        self.fc2 = nn.Linear(hidden, dim)

    def forward(self, x):
        x = x + self.attn(self.norm1(x))
        return x + self.fc2(self.gelu(self.fc1(self.norm2(x))))


class ViTTiny(nn.Module):
    def __init__(self, classes=10, dim=32, patch=8, image=32, heads=2, depth=2):
        super().__init__()
        self.tokens = (image // patch) ** 2
        self.dim = dim
        self.patch = nn.Conv2d(3, dim, patch, patch)
        self.pos = nn.Parameter(torch.randn(1, self.tokens, dim) * 0.02)
        self.blocks = nn.Sequential(*[EncoderBlock(dim, heads, self.tokens, 2 * dim) for _ in range(depth)])
        self.norm = nn.LayerNorm(dim)
        self.head = nn.Linear(dim, classes)

    def forward(self, x):
        t = self.patch(x).reshape(-1, self.dim, self.tokens).transpose(1, 2) + self.pos
        t = self.norm(self.blocks(t))
        return self.head(t.mean(1))


# ------------------------------------------- recurrent sequence classifiers
class LSTMClassifier(nn.Module):
    def __init__(self, vocab=50, emb=16, hidden=24, classes=4):
        super().__init__()
        self.embed = nn.Embedding(vocab, emb)
        self.rnn = nn.LSTM(emb, hidden, batch_first=True)
        self.fc = nn.Linear(hidden, 16)
        self.act = nn.Tanh()
        self.out = nn.Linear(16, classes)

    def forward(self, tokens):
        y, _ = self.rnn(self.embed(tokens))
        return self.out(self.act(self.fc(y[:, -1])))


class GRUClassifier(nn.Module):
    def __init__(self, vocab=50, emb=16, hidden=16, classes=4):
        super().__init__()
        self.embed = nn.Embedding(vocab, emb)
        self.rnn = nn.GRU(emb, hidden, batch_first=True, bidirectional=True)
        self.fc = nn.Linear(2 * hidden, 16)
        self.act = nn.ReLU()
        self.out = nn.Linear(16, classes)

    def forward(self, tokens):
        y, _ = self.rnn(self.embed(tokens))
        return self.out(self.act(self.fc(y.mean(1))))


# ------------------------------------------- 1-D convolutional time-series model
class TemporalBlock(nn.Module):
    def __init__(self, c, dilation):
        super().__init__()
        self.conv1 = nn.Conv1d(c, c, 3, padding=dilation, dilation=dilation)
        self.bn1 = nn.BatchNorm1d(c)
        self.relu1 = nn.ReLU()
        self.conv2 = nn.Conv1d(c, c, 3, padding=dilation, dilation=dilation)
        self.relu2 = nn.ReLU()

    def forward(self, x):
        return self.relu2(x + self.conv2(self.relu1(self.bn1(self.conv1(x)))))


class TCN1D(nn.Module):
    def __init__(self, cin=4, c=16, classes=3):
        super().__init__()
        self.inp = nn.Conv1d(cin, c, 5, padding=2)
        self.inp_act = nn.ReLU()
        self.block1 = TemporalBlock(c, 2)
        self.down = nn.MaxPool1d(2)
        self.block2 = TemporalBlock(c, 4)
        self.pool = nn.AdaptiveAvgPool1d(1)
        self.fc = nn.Linear(c, classes)

    def forward(self, x):
        x = self.block2(self.down(self.block1(self.inp_act(self.inp(x)))))
        return self.fc(torch.flatten(self.pool(x), 1))


# ---------------------------------------------------------------- driver
def prime_batchnorm(model, make_input, seed):
    """Give BatchNorm layers non-trivial affine parameters and running stats, and
    LayerNorm layers non-trivial affine parameters (as after training; this also
    keeps the exporter from merging identical all-ones/all-zeros initializers)."""
    g = torch.Generator().manual_seed(seed)
    with torch.no_grad():
        for m in model.modules():
            if isinstance(m, nn.LayerNorm):
                m.weight.copy_(1.0 + 0.2 * torch.randn(m.weight.shape, generator=g))
                m.bias.copy_(0.1 * torch.randn(m.bias.shape, generator=g))
    bns = [m for m in model.modules() if isinstance(m, (nn.BatchNorm1d, nn.BatchNorm2d))]
    if not bns:
        return
    with torch.no_grad():
        for m in bns:
            m.weight.copy_(1.0 + 0.2 * torch.randn(m.weight.shape, generator=g))
            m.bias.copy_(0.1 * torch.randn(m.bias.shape, generator=g))
        model.train()
        for _ in range(5):
            model(make_input(g, 8))
    model.eval()


def image_input(c=3, h=32, w=32):
    return lambda g, n: torch.randn(n, c, h, w, generator=g)


def token_input(vocab=50, length=12):
    return lambda g, n: torch.randint(0, vocab, (n, length), generator=g)


def series_input(c=4, length=64):
    def make(g, n):
        t = torch.linspace(0, 6.283, length)
        base = torch.sin(t[None, None, :] * torch.arange(1, c + 1)[None, :, None])
        return base.expand(n, c, length) + 0.3 * torch.randn(n, c, length, generator=g)
    return make


MODELS = [
    # name, constructor, opset, input maker, constant folding, sequence modules, description
    ("resnet_tiny", ResNetTiny, 11, image_input(), True, (),
     "residual CNN: conv-BN-ReLU stem, two basic blocks (identity and 1x1 projection shortcut), "
     "global average pool, linear; input [N,3,32,32]"),
    ("mobile_hardswish", MobileTiny, 17, image_input(), True, (),
     "inverted-residual mobile CNN: 1x1 expand / depthwise 3x3 / 1x1 project with BatchNorm, "
     "Hardswish, squeeze-excitation with Hardsigmoid gate, residual adds; input [N,3,32,32]"),
    ("dwsep_silu", DWSepSiLU, 13, image_input(), True, (),
     "depthwise-separable CNN without normalisation: depthwise 3x3 + pointwise 1x1 convolutions "
     "with SiLU (exported as Sigmoid+Mul); input [N,3,32,32]"),
    ("densenet_tiny", DenseTiny, 11, image_input(), True, (),
     "densely connected CNN: BN-ReLU-conv layers whose outputs are concatenated with their inputs, "
     "transition 1x1 conv + average pool; input [N,3,32,32]"),
    ("vgg_bn", VGGBN, 13, image_input(), False, (),
     "VGG-style CNN: conv-BatchNorm-ReLU stacks and max pooling, two-layer classifier; "
     "BatchNormalization kept unfused (do_constant_folding=False); input [N,3,32,32]"),
    ("vit_tiny", ViTTiny, 17, image_input(), True, ("blocks", "norm"),
     "vision transformer: 8x8 patch embedding conv, learned position embedding, two pre-norm encoder "
     "blocks (LayerNormalization, hand-written 2-head attention with MatMul/Softmax, GELU MLP via Erf), "
     "mean pooling, linear head; input [N,3,32,32]"),
    ("lstm_classifier", LSTMClassifier, 13, token_input(), True, ("embed", "rnn"),
     "sequence classifier: Embedding (Gather) -> LSTM (batch_first) -> last step -> linear -> tanh -> "
     "linear; input int64 token ids [N,12], vocabulary 50"),
    ("gru_classifier", GRUClassifier, 11, token_input(), True, ("embed", "rnn"),
     "sequence classifier: Embedding (Gather) -> bidirectional GRU -> mean over time -> linear -> ReLU "
     "-> linear; input int64 token ids [N,12], vocabulary 50"),
    ("tcn1d", TCN1D, 17, series_input(), True, (),
     "1-D convolutional time-series model: conv1d stem, two dilated residual blocks with BatchNorm1d, "
     "max pool, global average pool, linear; input [N,4,64]"),
]


def main():
    REF.mkdir(parents=True, exist_ok=True)
    index = []
    for k, (name, ctor, opset, make_input, fold, seq, desc) in enumerate(MODELS):
        common.setup(1000 + k)
        model = ctor()
        prime_batchnorm(model, make_input, 2000 + k)
        model.eval()
        x = make_input(torch.Generator().manual_seed(3000 + k), BATCH)
        onnx_model, mapping, captured, final = common.export_and_map(
            model, x, opset, REF / (name + ".onnx"), constant_folding=fold)
        mods = dict(model.named_modules())
        layers = common.build_layers(onnx_model, mapping, captured, mods, common.default_unit_axis(seq))
        bn_names = [n for n, m in mods.items() if isinstance(m, (nn.BatchNorm1d, nn.BatchNorm2d))]
        bn = common.batchnorm_records(model, common.capture_inputs(model, bn_names, x), mapping)
        weights = common.build_weights(onnx_model, model)
        xin = x.numpy()
        if xin.dtype.kind == "f":
            xin = xin.astype(np.float32)
        np.save(REF / (name + ".input.npy"), xin)
        np.save(REF / (name + ".output.npy"), final.numpy().astype(np.float32))
        g = common.golden(name, onnx_model, model, xin, final, layers, weights, extra={
            "description": desc,
            "export": {"do_constant_folding": fold, "training": "PRESERVE (model in eval mode)",
                       "dynamic_axes": {"input": {"0": "N"}, "output": {"0": "N"}}},
            "batchnorm": bn,
        })
        assert g["opset"] == opset
        common.write_json(REF / (name + ".golden.json"), g)
        index.append({
            "name": name, "kind": "reference", "architecture": desc, "opset": opset,
            "files": {"model": name + ".onnx", "input": name + ".input.npy",
                      "output": name + ".output.npy", "golden": name + ".golden.json"},
            "input_name": g["input_name"], "input_dtype": g["input_dtype"], "input_shape": g["input_shape"],
            "op_types": g["op_types"], "pathology": None,
        })
        print("%-18s opset %d  nodes %3d  layers %2d  ops %s" % (
            name, opset, g["nodes"], len(layers), " ".join(g["op_types"])))
    common.update_index(index, "reference")


if __name__ == "__main__":
    main()
