"""Writes tiny transformer models with known attention and residual-stream
pathologies, a sample and golden statistics.

    /usr/bin/python3 testdata/gen/transformer_models.py

Writes testdata/transformer/<name>.{onnx,input.npy,golden.json}. The scenario
(our own): sequences of 8 readings of 16 features from a fleet of conveyor
sensors; a reading of all zeros is a gap (padding). Models (d 16, 4 heads of
4, MLP 32, untrained fixed-seed weights, torch 1.13 export at opset 17):

- decoder_causal: 3 pre-norm blocks, RMS normalisation written out (decomposed
  in the graph), an additive causal mask of 0 / -inf;
- encoder_padding: 3 post-norm blocks (LayerNormalization), keys of gap
  readings masked with -inf (the mask computed from the input); also
  exported at opset 15 (encoder_padding_opset15.onnx), where LayerNorm is
  written out as ReduceMean/Sub/Pow/Sqrt/Div;
- collapsed_head: 3 pre-norm blocks, no mask; block 1 head 2's query weights
  scaled by 100 so that its attention is nearly one-hot;
- massive_activation: the decoder with block 1's MLP output bias on feature 5
  set to 3000, a massive value carried by the residual stream from there on;
- torch_encoder: two nn.TransformerEncoderLayer (post-norm, 4 heads), whose
  export writes the probabilities as one (B·H, S, S) tensor; the goldens
  come from nn.MultiheadAttention's own per-head weights
  (need_weights=True, average_attn_weights=False).

Golden statistics are computed here with NumPy from the tensors the eager
torch model exposes (the attention probabilities and every residual-stream
tensor), with the definitions of docs/transformers.md: per head the mean over
rows with K > 1 of H/ln K (K = keys with non-zero probability), the mean row
maximum, the one-hot rows (K = 1); per residual tensor max |x|, median |x|,
the feature dims with |x| >= 6 at >= 6% of positions (Dettmers et al. 2022),
the mean pairwise cosine similarity of the token vectors of a sequence.
"""

import json
import math
from pathlib import Path

import numpy as np
import torch
import torch.nn as nn

torch.set_num_threads(1)
torch.use_deterministic_algorithms(True)
OUT = Path(__file__).resolve().parents[2] / "testdata" / "transformer"
D, H, S, MLP, N = 16, 4, 8, 32, 24


class RMSNorm(nn.Module):
    def __init__(self, d):
        super().__init__()
        self.weight = nn.Parameter(torch.ones(d))

    def forward(self, x):
        return x / torch.sqrt((x * x).mean(-1, keepdim=True) + 1e-6) * self.weight


class Block(nn.Module):
    def __init__(self, prenorm, norm):
        super().__init__()
        self.prenorm = prenorm
        self.n1 = RMSNorm(D) if norm == "rms" else nn.LayerNorm(D)
        self.n2 = RMSNorm(D) if norm == "rms" else nn.LayerNorm(D)
        self.q, self.k, self.v, self.o = (nn.Linear(D, D) for _ in range(4))
        self.fc1, self.fc2 = nn.Linear(D, MLP), nn.Linear(MLP, D)
        self.act = nn.GELU()
        self.probs = None
        self.resid = []

    def attn(self, x, bias):
        B = x.shape[0]
        q = self.q(x).reshape(B, S, H, D // H).transpose(1, 2)
        k = self.k(x).reshape(B, S, H, D // H).transpose(1, 2)
        v = self.v(x).reshape(B, S, H, D // H).transpose(1, 2)
        s = q @ k.transpose(-1, -2) / math.sqrt(D // H)
        if bias is not None:
            s = s + bias
        p = torch.softmax(s, dim=-1)
        self.probs = p
        y = (p @ v).transpose(1, 2).reshape(B, S, D)
        return self.o(y)

    def forward(self, x, bias):
        self.resid = []
        if self.prenorm:
            x = x + self.attn(self.n1(x), bias)
            self.resid.append(x)
            x = x + self.fc2(self.act(self.fc1(self.n2(x))))
            self.resid.append(x)
        else:
            r = x + self.attn(x, bias)
            self.resid.append(r)
            x = self.n1(r)
            r = x + self.fc2(self.act(self.fc1(x)))
            self.resid.append(r)
            x = self.n2(r)
        return x


class Net(nn.Module):
    def __init__(self, prenorm, norm, mask):
        super().__init__()
        self.mask = mask
        self.blocks = nn.ModuleList(Block(prenorm, norm) for _ in range(3))
        self.head = nn.Linear(D, 4)
        causal = torch.full((S, S), float("-inf")).triu(1)
        self.register_buffer("causal", causal)

    def forward(self, x):
        bias = None
        if self.mask == "causal":
            bias = self.causal
        elif self.mask == "padding":
            gap = (x.abs().sum(-1) == 0).float()  # (B, S): 1 for a gap reading
            bias = (gap * -1e30).masked_fill(gap > 0, float("-inf"))[:, None, None, :]
        for b in self.blocks:
            x = b(x, bias)
        return self.head(x)


def sample(rng, gaps):
    x = rng.standard_normal((N, S, D)).astype(np.float32)
    if gaps:
        for i in range(N):
            g = i % 4  # 0–3 trailing gap readings
            if g:
                x[i, S - g:] = 0
    return x


def head_stats(p):
    """p (B, H, Sq, K) float32 probabilities → per-head entropy, max prob, one-hot rows."""
    p = p.astype(np.float64)
    nz = p > 0
    K = nz.sum(-1)
    logp = np.where(nz, np.log(np.where(nz, p, 1)), 0)
    Hrow = -(p * logp).sum(-1)
    ent, mx, onehot = [], [], []
    for h in range(p.shape[1]):
        keep = K[:, h] > 1
        ent.append(float((Hrow[:, h][keep] / np.log(K[:, h][keep])).mean()))
        mx.append(float(p[:, h].max(-1).mean()))
        onehot.append(int((K[:, h] == 1).sum()))
    return ent, mx, onehot


def resid_stats(x):
    a = np.abs(x.astype(np.float64))
    mx, med = float(a.max()), float(np.median(a))
    share = (a >= 6).reshape(-1, a.shape[-1]).mean(0)
    u = x.astype(np.float64) / np.linalg.norm(x.astype(np.float64), axis=-1, keepdims=True)
    sims = []
    for b in range(x.shape[0]):
        g = u[b] @ u[b].T
        n = g.shape[0]
        sims.append((g.sum() - np.trace(g)) / (n * (n - 1)))
    return {"max_abs": mx, "median_abs": med, "max_over_median": mx / med,
            "outlier_dims": [int(i) for i in np.nonzero(share >= 0.06)[0]],
            "token_similarity": float(np.mean(sims))}


def build(name, prenorm, norm, mask, gaps, tweak=None, also_opset=None):
    torch.manual_seed(7)
    net = Net(prenorm, norm, mask).eval()
    if tweak:
        tweak(net)
    rng = np.random.default_rng(11)
    x = sample(rng, gaps)
    with torch.no_grad():
        net(torch.from_numpy(x))
    blocks = []
    for i, b in enumerate(net.blocks):
        ent, mx, onehot = head_stats(b.probs.numpy())
        blocks.append({"block": i, "attention_entropy": ent, "attention_max_prob": mx, "one_hot_rows": onehot,
                       "residual": [resid_stats(r.numpy()) for r in b.resid]})
    torch.onnx.export(net, torch.from_numpy(x[:2]), str(OUT / (name + ".onnx")), opset_version=17,
                      input_names=["readings"], output_names=["scores"],
                      dynamic_axes={"readings": {0: "batch"}, "scores": {0: "batch"}})
    if also_opset:
        # the same network before LayerNormalization existed (opset < 17): decomposed
        torch.onnx.export(net, torch.from_numpy(x[:2]), str(OUT / ("%s_opset%d.onnx" % (name, also_opset))),
                          opset_version=also_opset, input_names=["readings"], output_names=["scores"],
                          dynamic_axes={"readings": {0: "batch"}, "scores": {0: "batch"}})
    np.save(OUT / (name + ".input.npy"), x)
    golden = {"model": name, "source": "torch %s eager forward, statistics in NumPy %s" % (torch.__version__, np.__version__),
              "samples": int(x.shape[0]), "blocks": blocks}
    (OUT / (name + ".golden.json")).write_text(json.dumps(golden, indent=1) + "\n")
    return golden


def collapse(net):
    with torch.no_grad():
        w = net.blocks[1].q.weight
        w[2 * (D // H):3 * (D // H)] *= 100
        net.blocks[1].q.bias[2 * (D // H):3 * (D // H)] *= 100


def massive(net):
    with torch.no_grad():
        net.blocks[1].fc2.bias[5] = 3000.0


class TorchEncoder(nn.Module):
    def __init__(self):
        super().__init__()
        self.layers = nn.ModuleList(nn.TransformerEncoderLayer(D, H, MLP, dropout=0.0, batch_first=True) for _ in range(2))
        self.head = nn.Linear(D, 4)

    def forward(self, x):
        for l in self.layers:
            x = l(x)
        return self.head(x.mean(1))


def build_torch_encoder():
    torch.manual_seed(5)
    net = TorchEncoder().eval()
    x = sample(np.random.default_rng(13), False)
    blocks = []
    h = torch.from_numpy(x)
    with torch.no_grad():
        for i, l in enumerate(net.layers):
            _, p = l.self_attn(h, h, h, need_weights=True, average_attn_weights=False)
            ent, mx, onehot = head_stats(p.numpy())
            r1 = h + l.self_attn(h, h, h, need_weights=False)[0]
            h1 = l.norm1(r1)
            r2 = h1 + l.linear2(l.activation(l.linear1(h1)))
            blocks.append({"block": i, "attention_entropy": ent, "attention_max_prob": mx, "one_hot_rows": onehot,
                           "residual": [resid_stats(r1.numpy()), resid_stats(r2.numpy())]})
            h = l.norm2(r2)
    # grad enabled: under no_grad the layer takes a fused path with no ONNX export
    torch.onnx.export(net, torch.from_numpy(x[:2]), str(OUT / "torch_encoder.onnx"), opset_version=17,
                      input_names=["readings"], output_names=["scores"],
                      dynamic_axes={"readings": {0: "batch"}, "scores": {0: "batch"}})
    np.save(OUT / "torch_encoder.input.npy", x)
    golden = {"model": "torch_encoder", "source": "torch %s nn.MultiheadAttention per-head weights, statistics in NumPy %s" % (torch.__version__, np.__version__),
              "samples": int(x.shape[0]), "blocks": blocks}
    (OUT / "torch_encoder.golden.json").write_text(json.dumps(golden, indent=1) + "\n")
    return golden


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    g = build_torch_encoder()
    print("torch_encoder entropy", [["%.3f" % e for e in b["attention_entropy"]] for b in g["blocks"]])
    g = build("decoder_causal", True, "rms", "causal", False)
    print("decoder_causal entropy", [["%.3f" % e for e in b["attention_entropy"]] for b in g["blocks"]])
    g = build("encoder_padding", False, "ln", "padding", True, also_opset=15)
    print("encoder_padding entropy", [["%.3f" % e for e in b["attention_entropy"]] for b in g["blocks"]])
    g = build("collapsed_head", True, "ln", None, False, collapse)
    e = g["blocks"][1]["attention_entropy"]
    print("collapsed_head block 1 entropy", ["%.4f" % v for v in e], "one-hot rows", g["blocks"][1]["one_hot_rows"])
    assert e[2] < 0.1 and min(e[:2] + e[3:]) > 0.3, "the scaled head must collapse and only it"
    g = build("massive_activation", True, "rms", "causal", False, massive)
    r = g["blocks"][1]["residual"][1]
    print("massive_activation block 1 MLP residual", r["max_abs"], r["median_abs"], r["outlier_dims"])
    assert r["max_over_median"] > 1000 and r["max_abs"] > 100 and 5 in r["outlier_dims"]
    assert g["blocks"][0]["residual"][1]["max_over_median"] < 100


if __name__ == "__main__":
    main()
