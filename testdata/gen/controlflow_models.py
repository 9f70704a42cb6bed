"""Control-flow test models for vitals: networks that live inside If branches,
Loop and Scan bodies, and weights held in Constant nodes.

Writes testdata/controlflow/<name>.{onnx,input.npy,golden.json} (and, for the
If model, each branch as a model of its own: <name>.then.onnx, <name>.else.onnx).
Runs with Debian's python3-onnx 1.12 (helper API) and python3-numpy only:

    /usr/bin/python3 testdata/gen/controlflow_models.py

With --exposed DIR it writes instead, into DIR, the branch and body graphs
as models of their own with every inner tensor exposed as an output; they
are what testdata/gen/controlflow_ort.sh runs with ONNX Runtime to check the
golden statistics a second way.

The golden statistics are computed here with NumPy, independently of vitals:
each network is evaluated in NumPy (float32 values, as ONNX prescribes) and
every float value a node inside a branch or body produces is accumulated in
float64 over every execution (every batch that took the branch, every loop
iteration or scan step of every batch). Layer names follow vitals' naming
scheme for subgraph nodes (docs/subgraphs.md):

    <control-flow node>/<then|else|body>/<inner node name without its leading "/">

All scenarios are invented test data (seeded Gaussian weights and inputs).
"""

import json
import sys
from pathlib import Path

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

REPO = Path(__file__).resolve().parents[2]
OUT = REPO / "testdata" / "controlflow"
OPSET = 13
SOURCE = "NumPy %s, float64 accumulation over float32 values (testdata/gen/controlflow_models.py)" % np.__version__

rng = np.random.default_rng(20261204)


def gauss(*shape, std=1.0):
    return (rng.standard_normal(shape) * std).astype(np.float32)


def init(name, arr):
    return numpy_helper.from_array(np.asarray(arr), name)


def const_node(name, out, arr):
    return helper.make_node("Constant", [], [out], name=name, value=numpy_helper.from_array(np.asarray(arr), out + "_value"))


def qualify(prefix, name):
    return prefix + "/" + name[1:] if name.startswith("/") else prefix + "/" + name


# ---------------------------------------------------------------- statistics

class Acc:
    """Statistics of one value over every execution, as vitals reports them."""

    def __init__(self, node, op, output, act=None, unit_axis=None):
        self.node, self.op, self.output = node, op, output
        self.act, self.unit_axis = act, unit_axis  # act: "relu", "tanh", "sigmoid" or None
        self.vals = []
        self.shape = None

    def add(self, y):
        y = np.asarray(y, dtype=np.float32)
        if self.shape is None:
            self.shape = list(y.shape)
        self.vals.append(y)

    def golden(self):
        flat = np.concatenate([v.reshape(-1) for v in self.vals]).astype(np.float64)
        d = {
            "node": self.node, "op": self.op, "output": self.output, "shape": self.shape,
            "executions": len(self.vals), "count": int(flat.size),
            "mean": float(flat.mean()), "std": float(flat.std()),
            "min": float(flat.min()), "max": float(flat.max()),
            "zero_fraction": float(np.mean(flat == 0)),
            "units": None, "unit_axis": None, "dead_fraction": None, "saturated_fraction": None,
        }
        if self.act is not None:
            ax = self.unit_axis % self.vals[0].ndim
            units = self.vals[0].shape[ax]
            ever = np.zeros(units, dtype=bool)
            for v in self.vals:
                ever |= (np.moveaxis(v, ax, 0).reshape(units, -1) > 0).any(axis=1)
            d["units"], d["unit_axis"] = int(units), int(ax)
            if self.act == "relu":
                d["dead_fraction"] = float(np.mean(~ever))
            if self.act == "tanh":
                d["saturated_fraction"] = float(np.mean(np.abs(flat) > 0.99))
            if self.act == "sigmoid":
                d["saturated_fraction"] = float(np.mean((flat < 0.01) | (flat > 0.99)))
        return d


def weight_golden(name, node, w, fan_in):
    w64 = w.astype(np.float64)
    std = float(w64.std())
    return {"name": name, "node": node, "shape": list(w.shape), "fan_in": int(fan_in), "std": std,
            "gain": std * float(np.sqrt(fan_in))}


# ---------------------------------------------------------------- NumPy ops (float32)

def conv1d(x, w, b, stride, pad):
    """ONNX Conv on [N, C, L] with [M, C, K] weights, symmetric padding."""
    n, c, l = x.shape
    m, _, k = w.shape
    xp = np.pad(x, ((0, 0), (0, 0), (pad, pad)))
    lo = (l + 2 * pad - k) // stride + 1
    y = np.zeros((n, m, lo), dtype=np.float64)
    for j in range(lo):
        seg = xp[:, :, j * stride:j * stride + k].astype(np.float64)  # [N, C, K]
        y[:, :, j] = np.einsum("nck,mck->nm", seg, w.astype(np.float64))
    return (y + b.astype(np.float64)[None, :, None]).astype(np.float32)


def relu(x):
    return np.maximum(x, np.float32(0))


def gemm_t(x, w, b):
    """Gemm with transB=1: x·wᵀ + b."""
    return (x.astype(np.float64) @ w.astype(np.float64).T + b).astype(np.float32)


def matmul(a, b):
    return (a.astype(np.float64) @ b.astype(np.float64)).astype(np.float32)


def save(name, model, golden, arrays):
    OUT.mkdir(parents=True, exist_ok=True)
    onnx.checker.check_model(model)
    onnx.save(model, str(OUT / (name + ".onnx")))
    for suffix, arr in arrays.items():
        np.save(OUT / ("%s.%s.npy" % (name, suffix)), arr)
    golden["source"] = SOURCE
    golden["onnx_version"] = onnx.__version__
    with open(OUT / (name + ".golden.json"), "w") as f:
        json.dump(golden, f, indent=1)
        f.write("\n")


def opset_model(graph):
    m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)], producer_name="vitals-testdata-gen")
    m.ir_version = 8
    return m


# ---------------------------------------------------------------- If on a sample rate

def if_rate():
    """A keyword-spotting front end exported with a switch on the sample rate:
    input [N, 1, 64] frames, sr a scalar int64. The 16 kHz network (then
    branch) holds its weights as initializers of the branch; the 8 kHz network
    (else branch) reads its weights from the main graph. Two of the 16 kHz
    conv channels have biases far below any input reach: dead units 2/8."""
    name = "if_rate"
    L = 64
    w1t, b1t = gauss(8, 1, 5, std=0.45), gauss(8, std=0.1)
    b1t[[2, 5]] = -50.0
    w2t, b2t = gauss(4, 8, std=0.5), gauss(4, std=0.1)
    w1e, b1e = gauss(8, 1, 3, std=0.55), gauss(8, std=0.1)
    w2e, b2e = gauss(4, 8, std=0.5), gauss(4, std=0.1)

    def branch(tag, convw, convb, fcw, fcb, stride, pad, inits):
        p = "/" + tag
        nodes = [
            helper.make_node("Conv", ["input", convw, convb], [p + "conv1/Conv_output_0"], name=p + "conv1/Conv",
                             kernel_shape=[inits_shape[convw][2]], strides=[stride], pads=[pad, pad]),
            helper.make_node("Relu", [p + "conv1/Conv_output_0"], [p + "relu1/Relu_output_0"], name=p + "relu1/Relu"),
            helper.make_node("GlobalAveragePool", [p + "relu1/Relu_output_0"], [p + "pool/GlobalAveragePool_output_0"], name=p + "pool/GlobalAveragePool"),
            helper.make_node("Flatten", [p + "pool/GlobalAveragePool_output_0"], [p + "flat/Flatten_output_0"], name=p + "flat/Flatten"),
            helper.make_node("Gemm", [p + "flat/Flatten_output_0", fcw, fcb], [p + "fc/Gemm_output_0"], name=p + "fc/Gemm", transB=1),
            helper.make_node("Tanh", [p + "fc/Gemm_output_0"], [p + "out"], name=p + "act/Tanh"),
        ]
        out = helper.make_tensor_value_info(p + "out", TensorProto.FLOAT, None)
        return helper.make_graph(nodes, tag.strip("/") + "_net", [], [out], initializer=inits)

    inits_shape = {"/k16/conv1.weight": w1t.shape, "/k8/conv1.weight": w1e.shape}
    then_g = branch("k16/", "/k16/conv1.weight", "/k16/conv1.bias", "/k16/fc.weight", "/k16/fc.bias", 1, 2,
                    [init("/k16/conv1.weight", w1t), init("/k16/conv1.bias", b1t), init("/k16/fc.weight", w2t), init("/k16/fc.bias", b2t)])
    else_g = branch("k8/", "/k8/conv1.weight", "/k8/conv1.bias", "/k8/fc.weight", "/k8/fc.bias", 2, 1, [])
    main_inits = [init("/k8/conv1.weight", w1e), init("/k8/conv1.bias", b1e), init("/k8/fc.weight", w2e), init("/k8/fc.bias", b2e)]
    nodes = [
        const_node("/Constant", "/Constant_output_0", np.array(16000, dtype=np.int64)),
        helper.make_node("Equal", ["sr", "/Constant_output_0"], ["/Equal_output_0"], name="/Equal"),
        helper.make_node("If", ["/Equal_output_0"], ["output"], name="/If", then_branch=then_g, else_branch=else_g),
    ]
    x_vi = helper.make_tensor_value_info("input", TensorProto.FLOAT, ["N", 1, L])
    sr_vi = helper.make_tensor_value_info("sr", TensorProto.INT64, [])
    out_vi = helper.make_tensor_value_info("output", TensorProto.FLOAT, ["N", 4])
    model = opset_model(helper.make_graph(nodes, "if_rate", [x_vi, sr_vi], [out_vi], initializer=main_inits))

    # each branch as a model of its own: the outer-scope values it reads become inputs
    for tag, g, extra in (("then", then_g, []), ("else", else_g, main_inits)):
        sg = onnx.GraphProto()
        sg.CopyFrom(g)
        sg.name = name + "_" + tag
        sg.input.extend([x_vi])
        sg.initializer.extend(extra)
        sg.output[0].CopyFrom(helper.make_tensor_value_info(sg.output[0].name, TensorProto.FLOAT, ["N", 4]))
        m = opset_model(sg)
        onnx.checker.check_model(m)
        onnx.save(m, str(OUT / ("%s.%s.onnx" % (name, tag))))

    # the sample: 4 batches of 6 frames; batches 0, 2, 3 at 16 kHz, batch 1 at 8 kHz
    B, rates = 6, [16000, 8000, 16000, 16000]
    x = gauss(B * len(rates), 1, L)
    accs = {}

    def acc(prefix, node, op, out, act=None, axis=None):
        key = qualify(prefix, out)
        if key not in accs:
            accs[key] = Acc(qualify(prefix, node), op, key, act, axis)
        return accs[key]

    outs = []
    for k, sr in enumerate(rates):
        xb = x[k * B:(k + 1) * B]
        if sr == 16000:
            pre, tag, (cw, cb, fw, fb, st, pd) = "/If/then", "/k16/", (w1t, b1t, w2t, b2t, 1, 2)
        else:
            pre, tag, (cw, cb, fw, fb, st, pd) = "/If/else", "/k8/", (w1e, b1e, w2e, b2e, 2, 1)
        c = conv1d(xb, cw, cb, st, pd)
        acc(pre, tag + "conv1/Conv", "Conv", tag + "conv1/Conv_output_0").add(c)
        r = relu(c)
        acc(pre, tag + "relu1/Relu", "Relu", tag + "relu1/Relu_output_0", "relu", 1).add(r)
        g = r.astype(np.float64).mean(axis=2, keepdims=True).astype(np.float32)
        acc(pre, tag + "pool/GlobalAveragePool", "GlobalAveragePool", tag + "pool/GlobalAveragePool_output_0").add(g)
        fl = g.reshape(B, -1)
        acc(pre, tag + "flat/Flatten", "Flatten", tag + "flat/Flatten_output_0").add(fl)
        gm = gemm_t(fl, fw, fb)
        acc(pre, tag + "fc/Gemm", "Gemm", tag + "fc/Gemm_output_0").add(gm)
        y = np.tanh(gm).astype(np.float32)
        acc(pre, tag + "act/Tanh", "Tanh", tag + "out", "tanh", -1).add(y)
        outs.append(y)
    # the main graph's own float value: the If output
    golden = {
        "model": name + ".onnx", "input": name + ".input.npy", "input_name": "input", "batch": B,
        "scalar_input": "sr", "scalar_per_batch": rates,
        "branch_models": {"/If/then": name + ".then.onnx", "/If/else": name + ".else.onnx"},
        "nodes": 3 + 6 + 6, "nodes_in_subgraphs": 12,
        # the Constant node holds an int64
        "parameters": int(sum(a.size for a in (w1t, b1t, w2t, b2t, w1e, b1e, w2e, b2e))),
        "subgraph_runs": {"/If/then": 3, "/If/else": 1},
        "layers": [a.golden() for a in accs.values()],
        "weights": [
            weight_golden("/If/then/k16/conv1.weight", "/If/then/k16/conv1/Conv", w1t, 5),
            weight_golden("/If/then/k16/fc.weight", "/If/then/k16/fc/Gemm", w2t, 8),
            weight_golden("/k8/conv1.weight", "/If/else/k8/conv1/Conv", w1e, 3),
            weight_golden("/k8/fc.weight", "/If/else/k8/fc/Gemm", w2e, 8),
        ],
        "output": np.concatenate(outs).tolist(),
    }
    save(name, model, golden, {"input": x})


# ---------------------------------------------------------------- Loop: a recurrent cell for T steps

def shape_nodes(prefix, H):
    """Nodes computing zeros [N, H] from input's batch size (as exporters do for an initial state)."""
    return [
        helper.make_node("Shape", ["input"], [prefix + "Shape_output_0"], name=prefix + "Shape"),
        const_node(prefix + "Constant", prefix + "Constant_output_0", np.array([0], dtype=np.int64)),
        const_node(prefix + "Constant_1", prefix + "Constant_1_output_0", np.array([1], dtype=np.int64)),
        helper.make_node("Slice", [prefix + "Shape_output_0", prefix + "Constant_output_0", prefix + "Constant_1_output_0"],
                         [prefix + "Slice_output_0"], name=prefix + "Slice"),
        const_node(prefix + "Constant_2", prefix + "Constant_2_output_0", np.array([H], dtype=np.int64)),
        helper.make_node("Concat", [prefix + "Slice_output_0", prefix + "Constant_2_output_0"], [prefix + "Concat_output_0"],
                         name=prefix + "Concat", axis=0),
        helper.make_node("ConstantOfShape", [prefix + "Concat_output_0"], [prefix + "h0"], name=prefix + "ConstantOfShape",
                         value=numpy_helper.from_array(np.array([0], dtype=np.float32), "zero")),
    ]


def loop_rnn():
    """A tanh recurrent cell unrolled by a Loop over the T steps of a sequence
    [N, T, F]: h ← tanh(x_t·Wx + h·Wh + b), T taken from the input's shape.
    Wx lives in the body, Wh and b in the main graph."""
    name = "loop_rnn"
    N, T, F, H, C = 10, 6, 5, 8, 3
    wx, wh, b = gauss(F, H, std=0.9), gauss(H, H, std=0.5), gauss(H, std=0.2)
    wo, bo = gauss(C, H, std=0.5), gauss(C, std=0.1)
    body_nodes = [
        helper.make_node("Gather", ["input", "i"], ["/cell/Gather_output_0"], name="/cell/Gather", axis=1),
        helper.make_node("MatMul", ["/cell/Gather_output_0", "/cell/wx"], ["/cell/MatMul_output_0"], name="/cell/MatMul"),
        helper.make_node("MatMul", ["h", "/cell/wh"], ["/cell/MatMul_1_output_0"], name="/cell/MatMul_1"),
        helper.make_node("Add", ["/cell/MatMul_output_0", "/cell/MatMul_1_output_0"], ["/cell/Add_output_0"], name="/cell/Add"),
        helper.make_node("Add", ["/cell/Add_output_0", "/cell/b"], ["/cell/Add_1_output_0"], name="/cell/Add_1"),
        helper.make_node("Tanh", ["/cell/Add_1_output_0"], ["h_next"], name="/cell/Tanh"),
        helper.make_node("Identity", ["cond_in"], ["cond_out"], name="/cell/Identity"),
    ]
    body = helper.make_graph(
        body_nodes, "cell",
        [helper.make_tensor_value_info("i", TensorProto.INT64, []),
         helper.make_tensor_value_info("cond_in", TensorProto.BOOL, []),
         helper.make_tensor_value_info("h", TensorProto.FLOAT, ["N", H])],
        [helper.make_tensor_value_info("cond_out", TensorProto.BOOL, []),
         helper.make_tensor_value_info("h_next", TensorProto.FLOAT, ["N", H]),
         helper.make_tensor_value_info("/cell/Add_1_output_0", TensorProto.FLOAT, ["N", H])],
        initializer=[init("/cell/wx", wx)])
    nodes = shape_nodes("/", H) + [
        const_node("/Constant_3", "/Constant_3_output_0", np.array(1, dtype=np.int64)),
        helper.make_node("Gather", ["/Shape_output_0", "/Constant_3_output_0"], ["/Gather_output_0"], name="/Gather", axis=0),
        const_node("/Constant_4", "/Constant_4_output_0", np.array(True)),
        helper.make_node("Loop", ["/Gather_output_0", "/Constant_4_output_0", "/h0"], ["/Loop_output_0", "pre_activations"],
                         name="/Loop", body=body),
        helper.make_node("Gemm", ["/Loop_output_0", "/head.weight", "/head.bias"], ["output"], name="/head/Gemm", transB=1),
    ]
    inits = [init("/cell/wh", wh), init("/cell/b", b), init("/head.weight", wo), init("/head.bias", bo)]
    g = helper.make_graph(nodes, name, [helper.make_tensor_value_info("input", TensorProto.FLOAT, ["N", T, F])],
                          [helper.make_tensor_value_info("output", TensorProto.FLOAT, ["N", C]),
                           helper.make_tensor_value_info("pre_activations", TensorProto.FLOAT, [T, "N", H])], initializer=inits)
    model = opset_model(g)

    x = gauss(N, T, F)
    B = 4  # batches of 4, 4, 2 samples
    pre = "/Loop/body"
    names = [("/cell/Gather", "Gather", "/cell/Gather_output_0", None), ("/cell/MatMul", "MatMul", "/cell/MatMul_output_0", None),
             ("/cell/MatMul_1", "MatMul", "/cell/MatMul_1_output_0", None), ("/cell/Add", "Add", "/cell/Add_output_0", None),
             ("/cell/Add_1", "Add", "/cell/Add_1_output_0", None), ("/cell/Tanh", "Tanh", "h_next", "tanh")]
    accs = [Acc(qualify(pre, n), op, qualify(pre, o), act, -1 if act else None) for n, op, o, act in names]
    outs = []
    for lo in range(0, N, B):
        xb = x[lo:lo + B]
        h = np.zeros((xb.shape[0], H), dtype=np.float32)
        for t in range(T):
            xt = xb[:, t, :]
            m1 = matmul(xt, wx)
            m2 = matmul(h, wh)
            a = (m1 + m2).astype(np.float32)
            a1 = (a + b).astype(np.float32)
            h = np.tanh(a1).astype(np.float32)
            for ac, v in zip(accs, (xt, m1, m2, a, a1, h)):
                ac.add(v)
        outs.append(gemm_t(h, wo, bo))
    batches = len(range(0, N, B))
    golden = {
        "model": name + ".onnx", "input": name + ".input.npy", "input_name": "input", "batch": B,
        "nodes": len(nodes) + len(body_nodes), "nodes_in_subgraphs": len(body_nodes),
        # initializers only: the Constant nodes hold int64 and bool values
        "parameters": int(sum(a.size for a in (wx, wh, b, wo, bo))),
        "subgraph_runs": {pre: T * batches},
        "layers": [a.golden() for a in accs],
        "weights": [weight_golden(qualify(pre, "/cell/wx"), qualify(pre, "/cell/MatMul"), wx, F),
                    weight_golden("/cell/wh", qualify(pre, "/cell/MatMul_1"), wh, H),
                    weight_golden("/head.weight", "/head/Gemm", wo, H)],
        "output": np.concatenate(outs).tolist(),
    }
    save(name, model, golden, {"input": x})


# ---------------------------------------------------------------- Scan over a sequence

def scan_seq():
    """A ReLU recurrent cell run by Scan over axis 1 of a sequence [N, T, F]:
    h ← relu(x_t·Wx + h·Wh + b); two hidden units have biases far below
    reach: dead units 2/8 over every step."""
    name = "scan_seq"
    N, T, F, H, C = 9, 7, 4, 8, 2
    wx, wh, b = gauss(F, H, std=0.8), gauss(H, H, std=0.3), gauss(H, std=0.2)
    b[[1, 6]] = -40.0
    wo, bo = gauss(C, H, std=0.5), gauss(C, std=0.1)
    body_nodes = [
        helper.make_node("MatMul", ["x_t", "/rnn/wx"], ["/rnn/MatMul_output_0"], name="/rnn/MatMul"),
        helper.make_node("MatMul", ["h", "/rnn/wh"], ["/rnn/MatMul_1_output_0"], name="/rnn/MatMul_1"),
        helper.make_node("Add", ["/rnn/MatMul_output_0", "/rnn/MatMul_1_output_0"], ["/rnn/Add_output_0"], name="/rnn/Add"),
        helper.make_node("Add", ["/rnn/Add_output_0", "/rnn/b"], ["/rnn/Add_1_output_0"], name="/rnn/Add_1"),
        helper.make_node("Relu", ["/rnn/Add_1_output_0"], ["h_next"], name="/rnn/Relu"),
        helper.make_node("Identity", ["h_next"], ["y_t"], name="/rnn/Identity"),
    ]
    body = helper.make_graph(
        body_nodes, "rnn",
        [helper.make_tensor_value_info("h", TensorProto.FLOAT, ["N", H]),
         helper.make_tensor_value_info("x_t", TensorProto.FLOAT, ["N", F])],
        [helper.make_tensor_value_info("h_next", TensorProto.FLOAT, ["N", H]),
         helper.make_tensor_value_info("y_t", TensorProto.FLOAT, ["N", H])],
        initializer=[init("/rnn/wx", wx), init("/rnn/wh", wh), init("/rnn/b", b)])
    nodes = shape_nodes("/", H) + [
        helper.make_node("Scan", ["/h0", "input"], ["/Scan_output_0", "states"], name="/Scan", body=body,
                         num_scan_inputs=1, scan_input_axes=[1]),
        helper.make_node("Gemm", ["/Scan_output_0", "/head.weight", "/head.bias"], ["output"], name="/head/Gemm", transB=1),
    ]
    g = helper.make_graph(nodes, name, [helper.make_tensor_value_info("input", TensorProto.FLOAT, ["N", T, F])],
                          [helper.make_tensor_value_info("output", TensorProto.FLOAT, ["N", C]),
                           helper.make_tensor_value_info("states", TensorProto.FLOAT, [T, "N", H])],
                          initializer=[init("/head.weight", wo), init("/head.bias", bo)])
    model = opset_model(g)

    x = gauss(N, T, F)
    B = 4
    pre = "/Scan/body"
    names = [("/rnn/MatMul", "MatMul", "/rnn/MatMul_output_0", None), ("/rnn/MatMul_1", "MatMul", "/rnn/MatMul_1_output_0", None),
             ("/rnn/Add", "Add", "/rnn/Add_output_0", None), ("/rnn/Add_1", "Add", "/rnn/Add_1_output_0", None),
             ("/rnn/Relu", "Relu", "h_next", "relu"), ("/rnn/Identity", "Identity", "y_t", None)]
    accs = [Acc(qualify(pre, n), op, qualify(pre, o), act, -1 if act else None) for n, op, o, act in names]
    outs = []
    for lo in range(0, N, B):
        xb = x[lo:lo + B]
        h = np.zeros((xb.shape[0], H), dtype=np.float32)
        for t in range(T):
            m1 = matmul(xb[:, t, :], wx)
            m2 = matmul(h, wh)
            a = (m1 + m2).astype(np.float32)
            a1 = (a + b).astype(np.float32)
            h = relu(a1)
            for ac, v in zip(accs, (m1, m2, a, a1, h, h)):
                ac.add(v)
        outs.append(gemm_t(h, wo, bo))
    batches = len(range(0, N, B))
    golden = {
        "model": name + ".onnx", "input": name + ".input.npy", "input_name": "input", "batch": B,
        "nodes": len(nodes) + len(body_nodes), "nodes_in_subgraphs": len(body_nodes),
        "parameters": int(sum(a.size for a in (wx, wh, b, wo, bo))),
        "subgraph_runs": {pre: T * batches},
        "layers": [a.golden() for a in accs],
        "weights": [weight_golden(qualify(pre, "/rnn/wx"), qualify(pre, "/rnn/MatMul"), wx, F),
                    weight_golden(qualify(pre, "/rnn/wh"), qualify(pre, "/rnn/MatMul_1"), wh, H),
                    weight_golden("/head.weight", "/head/Gemm", wo, H)],
        "output": np.concatenate(outs).tolist(),
    }
    save(name, model, golden, {"input": x})


# ---------------------------------------------------------------- weights in Constant nodes

def const_weights():
    """A classifier whose every weight is a Constant node (as some exporters
    write them): Gemm → Relu → Gemm → Softmax, no initializers at all."""
    name = "const_weights"
    N, F, H, C = 12, 16, 12, 4
    w1, b1 = gauss(H, F, std=np.sqrt(2.0 / F)), gauss(H, std=0.1)
    w2, b2 = gauss(C, H, std=np.sqrt(1.0 / H)), gauss(C, std=0.1)
    nodes = [
        const_node("/fc1/Constant", "fc1.weight", w1),
        const_node("/fc1/Constant_1", "fc1.bias", b1),
        const_node("/fc2/Constant", "fc2.weight", w2),
        const_node("/fc2/Constant_1", "fc2.bias", b2),
        helper.make_node("Gemm", ["input", "fc1.weight", "fc1.bias"], ["/fc1/Gemm_output_0"], name="/fc1/Gemm", transB=1),
        helper.make_node("Relu", ["/fc1/Gemm_output_0"], ["/relu/Relu_output_0"], name="/relu/Relu"),
        helper.make_node("Gemm", ["/relu/Relu_output_0", "fc2.weight", "fc2.bias"], ["/fc2/Gemm_output_0"], name="/fc2/Gemm", transB=1),
        helper.make_node("Softmax", ["/fc2/Gemm_output_0"], ["output"], name="/Softmax", axis=-1),
    ]
    g = helper.make_graph(nodes, name, [helper.make_tensor_value_info("input", TensorProto.FLOAT, ["N", F])],
                          [helper.make_tensor_value_info("output", TensorProto.FLOAT, ["N", C])])
    model = opset_model(g)
    x = gauss(N, F)
    h = gemm_t(x, w1, b1)
    r = relu(h)
    z = gemm_t(r, w2, b2)
    accs = [Acc("/fc1/Gemm", "Gemm", "/fc1/Gemm_output_0"), Acc("/relu/Relu", "Relu", "/relu/Relu_output_0", "relu", -1),
            Acc("/fc2/Gemm", "Gemm", "/fc2/Gemm_output_0")]
    for a, v in zip(accs, (h, r, z)):
        a.add(v)
    golden = {
        "model": name + ".onnx", "input": name + ".input.npy", "input_name": "input", "batch": N,
        "nodes": len(nodes), "nodes_in_subgraphs": 0,
        "parameters": int(w1.size + b1.size + w2.size + b2.size),
        "subgraph_runs": {},
        "layers": [a.golden() for a in accs],
        "weights": [weight_golden("fc1.weight", "/fc1/Gemm", w1, F), weight_golden("fc2.weight", "/fc2/Gemm", w2, H)],
    }
    save(name, model, golden, {"input": x})


# ---------------------------------------------------------------- If guarding out-of-range input

def if_guard():
    """A classifier with a guard exported as an If on its own input: when
    any |x| of the batch exceeds 1000 (a corrupt sensor frame) the then
    branch returns uniform scores, else the network (in the else branch)
    runs. One data input, so vitals check runs it as shipped; on the sample
    the guard never fires: the then branch is never taken."""
    name = "if_guard"
    N, F, H, C = 20, 16, 12, 3
    w1, b1 = gauss(H, F, std=np.sqrt(2.0 / F)), gauss(H, std=0.1)
    w2, b2 = gauss(C, H, std=np.sqrt(1.0 / H)), gauss(C, std=0.1)
    then_nodes = [
        helper.make_node("Mul", ["input", "/guard/zero"], ["/guard/Mul_output_0"], name="/guard/Mul"),
        helper.make_node("ReduceMean", ["/guard/Mul_output_0"], ["/guard/ReduceMean_output_0"], name="/guard/ReduceMean", axes=[1], keepdims=1),
        helper.make_node("Expand", ["/guard/ReduceMean_output_0", "/guard/shape"], ["/guard/out"], name="/guard/Expand"),
    ]
    then_g = helper.make_graph(then_nodes, "guard", [], [helper.make_tensor_value_info("/guard/out", TensorProto.FLOAT, None)],
                               initializer=[init("/guard/zero", np.zeros(1, np.float32)), init("/guard/shape", np.array([1, C], np.int64))])
    else_nodes = [
        helper.make_node("Gemm", ["input", "/fc1.weight", "/fc1.bias"], ["/fc1/Gemm_output_0"], name="/fc1/Gemm", transB=1),
        helper.make_node("Relu", ["/fc1/Gemm_output_0"], ["/relu/Relu_output_0"], name="/relu/Relu"),
        helper.make_node("Gemm", ["/relu/Relu_output_0", "/fc2.weight", "/fc2.bias"], ["/fc2/out"], name="/fc2/Gemm", transB=1),
    ]
    else_g = helper.make_graph(else_nodes, "net", [], [helper.make_tensor_value_info("/fc2/out", TensorProto.FLOAT, None)])
    nodes = [
        helper.make_node("Abs", ["input"], ["/Abs_output_0"], name="/Abs"),
        helper.make_node("ReduceMax", ["/Abs_output_0"], ["/ReduceMax_output_0"], name="/ReduceMax", keepdims=0),
        const_node("/Constant", "/Constant_output_0", np.array(1000, dtype=np.float32)),
        helper.make_node("Greater", ["/ReduceMax_output_0", "/Constant_output_0"], ["/Greater_output_0"], name="/Greater"),
        helper.make_node("If", ["/Greater_output_0"], ["output"], name="/If", then_branch=then_g, else_branch=else_g),
    ]
    inits = [init("/fc1.weight", w1), init("/fc1.bias", b1), init("/fc2.weight", w2), init("/fc2.bias", b2)]
    g = helper.make_graph(nodes, name, [helper.make_tensor_value_info("input", TensorProto.FLOAT, ["N", F])],
                          [helper.make_tensor_value_info("output", TensorProto.FLOAT, ["N", C])], initializer=inits)
    model = opset_model(g)
    x = gauss(N, F)
    assert np.abs(x).max() < 1000
    h = gemm_t(x, w1, b1)
    r = relu(h)
    z = gemm_t(r, w2, b2)
    accs = [Acc("/If/else/fc1/Gemm", "Gemm", "/If/else/fc1/Gemm_output_0"),
            Acc("/If/else/relu/Relu", "Relu", "/If/else/relu/Relu_output_0", "relu", -1),
            Acc("/If/else/fc2/Gemm", "Gemm", "/If/else/fc2/out")]
    for a, v in zip(accs, (h, r, z)):
        a.add(v)
    golden = {
        "model": name + ".onnx", "input": name + ".input.npy", "input_name": "input",
        "nodes": len(nodes) + len(then_nodes) + len(else_nodes), "nodes_in_subgraphs": len(then_nodes) + len(else_nodes),
        # the float Constant (the threshold) counts as one parameter, the then branch's zero as another
        "parameters": int(w1.size + b1.size + w2.size + b2.size) + 1 + 1,
        "never_taken": ["/If/then/guard/Mul", "/If/then/guard/ReduceMean", "/If/then/guard/Expand"],
        "never_taken_reason": "then_branch of /If never taken on this sample",
        "layers": [a.golden() for a in accs],
        "output": z.tolist(),
    }
    save(name, model, golden, {"input": x})


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    if_rate()
    loop_rnn()
    scan_seq()
    const_weights()
    if_guard()
    for p in sorted(OUT.iterdir()):
        print("%8d  %s" % (p.stat().st_size, p.relative_to(REPO)))


# ---------------------------------------------------------------- models exposing inner tensors, for ONNX Runtime

def expose_all(graph):
    """Adds every node output of graph (not already an output) as a float graph output (every value inside these branches and bodies is float)."""
    have = {o.name for o in graph.output}
    for n in graph.node:
        for o in n.output:
            if o and o not in have:
                graph.output.append(helper.make_tensor_value_info(o, TensorProto.FLOAT, None))
                have.add(o)


def body_model(model_path, node_name, extra_inputs):
    """The body of a Loop or Scan node as a model of its own: its formal
    inputs, then the outer-scope values it reads (extra_inputs: value infos),
    the main-graph initializers it reads, and every node output exposed."""
    m = onnx.load(str(model_path))
    node = next(n for n in m.graph.node if n.name == node_name)
    body = next(a.g for a in node.attribute if a.name == "body")
    g = onnx.GraphProto()
    g.CopyFrom(body)
    g.input.extend(extra_inputs)
    read = {i for n in g.node for i in n.input}
    local = {i.name for i in g.initializer}
    g.initializer.extend([t for t in m.graph.initializer if t.name in read and t.name not in local])
    expose_all(g)
    return opset_model(g)


def write_exposed(dest):
    """Writes, into dest (not committed), the models controlflow_ort.js runs
    with ONNX Runtime to read the tensors inside the branches and bodies."""
    dest = Path(dest)
    dest.mkdir(parents=True, exist_ok=True)
    for tag in ("then", "else"):
        m = onnx.load(str(OUT / ("if_rate.%s.onnx" % tag)))
        expose_all(m.graph)
        onnx.save(m, str(dest / ("if_rate.%s.onnx" % tag)))
    x_vi = helper.make_tensor_value_info("input", TensorProto.FLOAT, ["N", "T", "F"])
    onnx.save(body_model(OUT / "loop_rnn.onnx", "/Loop", [x_vi]), str(dest / "loop_rnn.body.onnx"))
    onnx.save(body_model(OUT / "scan_seq.onnx", "/Scan", []), str(dest / "scan_seq.body.onnx"))


if __name__ == "__main__":
    if len(sys.argv) == 3 and sys.argv[1] == "--exposed":
        write_exposed(sys.argv[2])
    else:
        main()
