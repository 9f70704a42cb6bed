"""Golden gradients for vitals' reverse mode (package grad), from PyTorch autograd.

For every model of testdata/ref/index.json whose operators are listed in OPS
below, the ONNX graph is evaluated node by node with torch operations in float64
(weights and inputs widened from the file's float32), the loss is the mean
cross-entropy over the sample, and torch.autograd gives dL/dW for every float
initializer and dL/dv for every node output. Written per model to
testdata/ref/<name>.grad.npz:

  labels          int64 [N]  the labels used: digits_labels.npy for the digits
                             models, the model's own top class (float64 forward)
                             for the reference architectures
  loss            float64 []  mean cross-entropy
  w/<initializer> float32     dL/dW (float32 to keep the file small; the Go test
                              compares at 1e-4 relative, far above float32's 6e-8)
  rms/<value>     float64 []  root mean square of dL/dv over all elements of v

Forward correctness is checked against <name>.output.npy (the torch eager model's
output, written by reference_models.py / pathology_models.py) before anything is
written. Run: /usr/bin/python3 testdata/gen/grad_golden.py
"""

import json
import math
from pathlib import Path

import numpy as np
import onnx
import onnx.numpy_helper
import torch
import torch.nn.functional as F

REF = Path(__file__).resolve().parents[2] / "testdata" / "ref"
torch.set_num_threads(1)


def attrs(node):
    return {a.name: onnx.helper.get_attribute_value(a) for a in node.attribute}


def pad_for_window(x, pads, nd, value=0.0):
    # ONNX pads [b1..bn, e1..en] -> F.pad order (last axis first)
    p = []
    for d in reversed(range(nd)):
        p += [pads[d], pads[nd + d]]
    if any(p):
        return F.pad(x, p, value=value)
    return x


def conv(x, w, b, a):
    nd = w.dim() - 2
    pads = a.get("pads", [0] * 2 * nd)
    x = pad_for_window(x, pads, nd)
    f = {1: F.conv1d, 2: F.conv2d, 3: F.conv3d}[nd]
    return f(x, w, b, stride=a.get("strides", [1] * nd), dilation=a.get("dilations", [1] * nd), groups=a.get("group", 1))


def pool(x, a, kind):
    nd = x.dim() - 2
    pads = a.get("pads", [0] * 2 * nd)
    k, s = a["kernel_shape"], a.get("strides", [1] * nd)
    assert not a.get("ceil_mode", 0) and not any(pads), "only unpadded floor-mode pools are used here"
    if kind == "max":
        return {1: F.max_pool1d, 2: F.max_pool2d}[nd](x, k, s)
    return {1: F.avg_pool1d, 2: F.avg_pool2d}[nd](x, k, s)


def onnx_rnn(kind, i, a, H):
    """ONNX LSTM (gates i o f c) or GRU (gates z r h), default activations,
    any direction; returns the node's outputs (Y [T, dirs, B, H], Y_h, Y_c)."""
    X, W, R = i[0], i[1], i[2]
    B_ = i[3] if len(i) > 3 and i[3] is not None else None
    h0 = i[5] if len(i) > 5 and i[5] is not None else None
    c0 = i[6] if len(i) > 6 and i[6] is not None else None
    T, N = X.shape[0], X.shape[1]
    direction = a.get("direction", b"forward")
    direction = direction.decode() if isinstance(direction, bytes) else direction
    revs = {"forward": [False], "reverse": [True], "bidirectional": [False, True]}[direction]
    G = W.shape[1]
    ys, hs, cs = [], [], []
    for d, rev in enumerate(revs):
        Wb = B_[d, :G] if B_ is not None else 0
        Rb = B_[d, G:] if B_ is not None else 0
        h = h0[d] if h0 is not None else torch.zeros(N, H, dtype=torch.float64)
        c = c0[d] if c0 is not None else torch.zeros(N, H, dtype=torch.float64)
        out = [None] * T
        for t in (reversed(range(T)) if rev else range(T)):
            if kind == "LSTM":
                g = X[t] @ W[d].t() + h @ R[d].t() + Wb + Rb
                gi, go, gf, gc = g.split(H, dim=1)
                c = torch.sigmoid(gf) * c + torch.sigmoid(gi) * torch.tanh(gc)
                h = torch.sigmoid(go) * torch.tanh(c)
            else:
                xw = X[t] @ W[d].t() + Wb
                Wbh = Wb[2 * H:] if B_ is not None else 0
                Rbh = Rb[2 * H:] if B_ is not None else 0
                xz, xr, xh = xw.split(H, dim=1)
                hz = h @ R[d][:H].t() + (Rb[:H] if B_ is not None else 0)
                hr = h @ R[d][H:2 * H].t() + (Rb[H:2 * H] if B_ is not None else 0)
                z, r = torch.sigmoid(xz + hz), torch.sigmoid(xr + hr)
                if a.get("linear_before_reset", 0):
                    hh = torch.tanh(xh + r * (h @ R[d][2 * H:].t() + Rbh))
                else:
                    hh = torch.tanh(xh + (r * h) @ R[d][2 * H:].t() + Rbh)
                h = (1 - z) * hh + z * h
            out[t] = h
        ys.append(torch.stack(out))
        hs.append(h)
        cs.append(c)
    Y = torch.stack(ys, dim=1)
    return [Y, torch.stack(hs), torch.stack(cs)]


def run_graph(model, x, keep):
    g = model.graph
    env = {}
    params = {}
    for init in g.initializer:
        arr = onnx.numpy_helper.to_array(init)
        if arr.dtype == np.float32:
            t = torch.tensor(arr.astype(np.float64), requires_grad=True)
            params[init.name] = t
        else:
            t = torch.tensor(arr)
        env[init.name] = t
    env[g.input[0].name] = x
    opset = model.opset_import[0].version
    for n in g.node:
        a = attrs(n)
        i = [env[v] if v else None for v in n.input]
        op = n.op_type
        if op == "Constant":
            y = torch.tensor(onnx.numpy_helper.to_array(a["value"]))
            if y.dtype == torch.float32:
                y = y.double()
        elif op in ("LSTM", "GRU"):
            outs = onnx_rnn(op, i, a, a["hidden_size"])
            for name, v in zip(n.output, outs):
                if name:
                    v.retain_grad()
                    keep[name] = v
                    env[name] = v
            continue
        elif op == "Gather":
            ax = a.get("axis", 0)
            idx = i[1].long()
            flat = i[0].index_select(ax, idx.reshape(-1) % i[0].shape[ax])
            y = flat.reshape(tuple(i[0].shape[:ax]) + tuple(idx.shape) + tuple(i[0].shape[ax + 1:]))
        elif op == "Shape":
            y = torch.tensor(list(i[0].shape), dtype=torch.int64)
        elif op == "ConstantOfShape":
            y = torch.zeros([int(v) for v in i[0].tolist()], dtype=torch.float64)
        elif op == "Unsqueeze":
            axes = a["axes"] if opset < 13 else [int(v) for v in i[1].tolist()]
            y = i[0]
            for ax in sorted(axes):
                y = y.unsqueeze(ax)
        elif op == "Squeeze":
            axes = a.get("axes") if opset < 13 else ([int(v) for v in i[1].tolist()] if len(i) > 1 else None)
            y = i[0]
            for ax in sorted(axes, reverse=True):
                y = y.squeeze(ax)
        elif op == "Conv":
            y = conv(i[0], i[1], i[2] if len(i) > 2 else None, a)
        elif op == "Gemm":
            A, B = i[0], i[1]
            if a.get("transA", 0):
                A = A.t()
            if a.get("transB", 0):
                B = B.t()
            y = a.get("alpha", 1.0) * A @ B
            if len(i) > 2 and i[2] is not None:
                y = y + a.get("beta", 1.0) * i[2]
        elif op == "MatMul":
            y = torch.matmul(i[0], i[1])
        elif op == "Add":
            y = i[0] + i[1]
        elif op == "Mul":
            y = i[0] * i[1]
        elif op == "Div":
            y = i[0] / i[1]
        elif op == "Relu":
            y = torch.relu(i[0])
        elif op == "Sigmoid":
            y = torch.sigmoid(i[0])
        elif op == "Tanh":
            y = torch.tanh(i[0])
        elif op == "Erf":
            y = torch.erf(i[0])
        elif op == "HardSigmoid":
            y = torch.clamp(a.get("alpha", 0.2) * i[0] + a.get("beta", 0.5), 0, 1)
        elif op == "HardSwish":
            y = F.hardswish(i[0])
        elif op == "BatchNormalization":
            y = F.batch_norm(i[0], i[3].detach(), i[4].detach(), i[1], i[2], False, 0.0, a.get("epsilon", 1e-5))
        elif op == "LayerNormalization":
            ax = a.get("axis", -1)
            shape = list(i[0].shape[ax:])
            y = F.layer_norm(i[0], shape, i[1], i[2] if len(i) > 2 else None, a.get("epsilon", 1e-5))
        elif op == "GlobalAveragePool":
            y = i[0].mean(dim=tuple(range(2, i[0].dim())), keepdim=True)
        elif op == "MaxPool":
            y = pool(i[0], a, "max")
        elif op == "AveragePool":
            y = pool(i[0], a, "avg")
        elif op == "Flatten":
            ax = a.get("axis", 1)
            y = i[0].reshape(int(np.prod(i[0].shape[:ax])), -1)
        elif op == "Reshape":
            shape = [int(v) for v in i[1].tolist()]
            shape = [i[0].shape[k] if v == 0 else v for k, v in enumerate(shape)]
            y = i[0].reshape(shape)
        elif op == "Transpose":
            y = i[0].permute(*a["perm"])
        elif op == "Softmax":
            y = torch.softmax(i[0], dim=a.get("axis", -1))
        elif op == "ReduceMean":
            y = i[0].mean(dim=tuple(a["axes"]), keepdim=bool(a.get("keepdims", 1)))
        elif op == "Concat":
            y = torch.cat(i, dim=a["axis"])
        elif op == "Pad":
            assert a.get("mode", b"constant") in (b"constant", "constant")
            pads = [int(v) for v in i[1].tolist()]
            nd = i[0].dim()
            value = float(i[2]) if len(i) > 2 and i[2] is not None else 0.0
            p = []
            for d in reversed(range(nd)):
                p += [pads[d], pads[nd + d]]
            y = F.pad(i[0], p, value=value)
        else:
            raise SystemExit("no torch rule for %s (node %s)" % (op, n.name))
        if y.dtype == torch.float64 and y.requires_grad:
            y.retain_grad()
            keep[n.output[0]] = y
        env[n.output[0]] = y
    return env[g.output[0].name], params


def main():
    index = json.loads((REF / "index.json").read_text())
    for m in index["models"]:
        model = onnx.load(str(REF / m["files"]["model"]))
        x = np.load(REF / m["files"]["input"])
        xt = torch.tensor(x.astype(np.float64) if x.dtype.kind == "f" else x.astype(np.int64))
        keep = {}
        out, params = run_graph(model, xt, keep)
        ref = np.load(REF / m["files"]["output"])
        err = np.abs(out.detach().numpy() - ref).max() / (np.abs(ref).max() + 1e-30)
        assert err < 1e-4, (m["name"], err)
        if m["kind"] == "pathology":
            labels = np.load(REF / "digits_labels.npy").astype(np.int64)[: x.shape[0]]
        else:
            labels = out.detach().argmax(dim=1).numpy().astype(np.int64)
        loss = F.cross_entropy(out, torch.tensor(labels))
        loss.backward()
        rec = {"labels": labels, "loss": np.float64(loss.item())}
        for name, p in params.items():
            if p.grad is not None:
                rec["w/" + name] = p.grad.numpy().astype(np.float32)
        for name, v in keep.items():
            if v.grad is not None:
                rec["rms/" + name] = np.float64(math.sqrt(float((v.grad ** 2).mean())))
        np.savez_compressed(REF / (m["name"] + ".grad.npz"), **rec)
        print(m["name"], "loss %.6f" % loss.item(), "forward rel err %.1e" % err, len(params), "weights")


if __name__ == "__main__":
    main()
