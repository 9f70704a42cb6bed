"""Export a GPT-2-small-shaped decoder to ONNX with random weights.

Usage: /usr/bin/python3 bench/gen/gpt2_small.py OUTDIR [--layers N] [--items N]

Writes OUTDIR/gpt2_small.onnx and OUTDIR/gpt2_small.npy (int64 token ids,
N items of 128 tokens from a seeded generator). The shape is GPT-2 small's:
12 pre-norm decoder blocks, d 768, 12 heads of 64, MLP 3072 with tanh-GELU,
vocabulary 50,257, 1,024 positions, the output projection tied to the token
embedding: 124.4M parameters (about 498 MB of float32). The attention is
written out (MatMul, scale, additive causal mask of 0 / -inf, Softmax,
MatMul) so that the exported graph has the (B, H, S, S) probability tensor
vitals observes. Weights: normal(0, 0.02), output projections of each block
scaled by 1/sqrt(2·layers), LayerNorm at 1/0, as in GPT-2's initialisation.
Needs Debian's python3-torch (1.13); export at opset 17.
"""

import argparse
import math
import os

import numpy as np
import torch
import torch.nn as nn

D, H, FF, VOCAB, CTX, TOKENS = 768, 12, 3072, 50257, 1024, 128


class Block(nn.Module):
    def __init__(self):
        super().__init__()
        self.ln1, self.ln2 = nn.LayerNorm(D), nn.LayerNorm(D)
        self.qkv, self.proj = nn.Linear(D, 3 * D), nn.Linear(D, D)
        self.fc, self.out = nn.Linear(D, FF), nn.Linear(FF, D)

    def forward(self, x, mask):
        B, S, _ = x.shape
        q, k, v = self.qkv(self.ln1(x)).split(D, dim=-1)
        q = q.reshape(B, S, H, D // H).transpose(1, 2)
        k = k.reshape(B, S, H, D // H).transpose(1, 2)
        v = v.reshape(B, S, H, D // H).transpose(1, 2)
        p = torch.softmax(q @ k.transpose(-1, -2) / math.sqrt(D // H) + mask, dim=-1)
        x = x + self.proj((p @ v).transpose(1, 2).reshape(B, S, D))
        return x + self.out(nn.functional.gelu(self.fc(self.ln2(x)), approximate="tanh"))


class GPT2Small(nn.Module):
    def __init__(self, layers):
        super().__init__()
        self.wte, self.wpe = nn.Embedding(VOCAB, D), nn.Embedding(CTX, D)
        self.blocks = nn.ModuleList(Block() for _ in range(layers))
        self.ln_f = nn.LayerNorm(D)
        self.register_buffer("mask", torch.full((TOKENS, TOKENS), float("-inf")).triu(1))
        for name, p in self.named_parameters():
            if p.dim() >= 2:
                nn.init.normal_(p, 0, 0.02)
                if name.endswith("proj.weight") or name.endswith("out.weight"):
                    p.data /= math.sqrt(2 * layers)
            elif "ln" in name:
                nn.init.ones_(p) if name.endswith("weight") else nn.init.zeros_(p)
            else:
                nn.init.zeros_(p)

    def forward(self, ids):
        pos = torch.arange(ids.shape[1], device=ids.device)
        x = self.wte(ids) + self.wpe(pos)
        for b in self.blocks:
            x = b(x, self.mask)
        # exported as MatMul with a transposed copy of the embedding; untie()
        # below makes it a Gemm(transB=1) on the embedding itself
        y = nn.functional.linear(self.ln_f(x).reshape(-1, D), self.wte.weight)
        return y.reshape(ids.shape[0], ids.shape[1], VOCAB)


def untie(path):
    """Replaces MatMul(x, transposed copy of wte) by Gemm(x, wte, transB=1)
    and drops the copy, so that the tied weight is stored once."""
    import onnx
    from onnx import helper

    m = onnx.load(path)
    inits = {i.name: i for i in m.graph.initializer}
    for i, n in enumerate(m.graph.node):
        w = inits.get(n.input[1]) if n.op_type == "MatMul" and len(n.input) == 2 else None
        if w is not None and list(w.dims) == [D, VOCAB]:
            m.graph.node[i].CopyFrom(helper.make_node("Gemm", [n.input[0], "wte.weight"], list(n.output), name=n.name, transB=1))
            m.graph.initializer.remove(w)
            break
    else:
        raise SystemExit("no MatMul on the transposed embedding found")
    onnx.save(m, path)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("out")
    ap.add_argument("--layers", type=int, default=12)
    ap.add_argument("--items", type=int, default=64)
    a = ap.parse_args()
    os.makedirs(a.out, exist_ok=True)
    torch.manual_seed(0)
    m = GPT2Small(a.layers).eval()
    n = sum(p.numel() for p in m.parameters())
    ids = np.random.default_rng(1).integers(0, VOCAB, size=(a.items, TOKENS), dtype=np.int64)
    path = os.path.join(a.out, "gpt2_small.onnx")
    with torch.no_grad():
        torch.onnx.export(m, torch.from_numpy(ids[:1]), path, input_names=["ids"], output_names=["logits"],
                          dynamic_axes={"ids": {0: "batch"}, "logits": {0: "batch"}}, opset_version=17)
    untie(path)
    np.save(os.path.join(a.out, "gpt2_small.npy"), ids)
    print("wrote %s: %d layers, %.1fM parameters" % (path, a.layers, n / 1e6))


if __name__ == "__main__":
    main()
