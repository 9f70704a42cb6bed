"""Shared helpers for the vitals reference-data generators.

Everything here runs with Debian's python3-torch (1.13) and python3-onnx (1.12).
There is no ONNX runtime on the build machine, so the mapping from a torch module
to the ONNX node that produces its output is established by *data flow*, not by
guessing from names:

1. the model is exported as it ships (``export``);
2. a wrapper that returns every hooked module output as an extra graph output is
   exported with the same settings; in that graph the tracer itself tells which
   node produced each hooked value (the node whose output is the extra graph
   output, looking through the Identity nodes the exporter adds for duplicated
   outputs);
3. both graphs are aligned node by node (the same trace in the same order; the
   sequences of op types must agree exactly, otherwise the script stops), and the
   producer found in step 2 is translated to the node of the shipped graph.

Every mapped node is then checked to exist in the shipped graph with the op type
recorded in the golden file, and, where ONNX shape inference knows the shape, that
the non-batch dimensions agree with the shape torch produced.
"""

import io
import json
import os
import random
from pathlib import Path

import numpy as np
import onnx
import onnx.numpy_helper
import onnx.shape_inference
import torch
import torch.nn as nn

REPO = Path(__file__).resolve().parents[2]
REF = REPO / "testdata" / "ref"
DEMO = REPO / "testdata" / "demo"

SOURCE = "torch %s forward hooks" % torch.__version__.split("a")[0].split("+")[0]
TORCH_VERSION = torch.__version__

# Module kinds whose outputs get a dead-unit fraction: the unit is dead when it
# is never > 0 over all samples and positions. (For SiLU/GELU the output can be
# negative, but it is > 0 exactly where the input is > 0, so the same definition
# applies; the Go side may choose to report null for them.)
RELU_FAMILY = (nn.ReLU, nn.ReLU6, nn.LeakyReLU, nn.Hardswish, nn.SiLU, nn.GELU)
SATURATING = (nn.Tanh, nn.Sigmoid)
HOOKED = (
    nn.Conv1d, nn.Conv2d, nn.Linear, nn.BatchNorm1d, nn.BatchNorm2d, nn.LayerNorm,
    nn.MaxPool1d, nn.MaxPool2d, nn.AvgPool1d, nn.AvgPool2d, nn.AdaptiveAvgPool1d,
    nn.AdaptiveAvgPool2d, nn.Embedding, nn.LSTM, nn.GRU, nn.Flatten, nn.Softmax, nn.Hardsigmoid,
) + RELU_FAMILY + SATURATING

SATURATION_DEFINITION = (
    "elements: fraction of all output elements with |y|>0.99 (Tanh) or "
    "y<0.01 or y>0.99 (Sigmoid)"
)
DEAD_DEFINITION = (
    "fraction of units (slices along unit_axis) whose output is never > 0 over all "
    "samples and positions; computed for ReLU, Hardswish, SiLU and GELU modules"
)
UNIT_AXIS_DEFINITION = (
    "1 for conv-shaped outputs [N,C,...] (Conv, BatchNorm, pooling and the "
    "activations applied to them); -1 (last axis) for dense outputs [N,F] and for "
    "token/sequence outputs [N,T,F] (transformer, RNN)"
)


def setup(seed=0):
    """Fix every source of randomness and keep to one thread (shared machine)."""
    os.environ.setdefault("CUBLAS_WORKSPACE_CONFIG", ":4096:8")
    torch.set_num_threads(1)
    torch.manual_seed(seed)
    np.random.seed(seed)
    random.seed(seed)
    torch.use_deterministic_algorithms(True)


# --------------------------------------------------------------------------
# export


class _Probe(nn.Module):
    """Runs the model and returns (output, *hooked module outputs)."""

    def __init__(self, model, names):
        super().__init__()
        self.m = model
        self.names = list(names)

    def forward(self, *xs):
        captured = {}
        handles = []
        mods = dict(self.m.named_modules())
        for name in self.names:
            def hook(mod, inp, out, name=name):
                if name in captured:
                    raise RuntimeError("module %s called twice" % name)
                captured[name] = out[0] if isinstance(out, tuple) else out
            handles.append(mods[name].register_forward_hook(hook))
        try:
            out = self.m(*xs)
        finally:
            for h in handles:
                h.remove()
        return (out,) + tuple(captured[n] for n in self.names)


def _export_bytes(model, args, opset, output_names, dynamic, constant_folding):
    f = io.BytesIO()
    axes = None
    if dynamic:
        axes = {"input": {0: "N"}}
        for n in output_names:
            axes[n] = {0: "N"}
    model.eval()
    torch.onnx.export(
        model,
        args,
        f,
        opset_version=opset,
        input_names=["input"],
        output_names=output_names,
        dynamic_axes=axes,
        do_constant_folding=constant_folding,
        # PRESERVE with a model in eval mode exports inference-mode
        # BatchNormalization nodes and skips the eval peephole pass that would
        # fuse Conv+BatchNormalization.
        training=torch.onnx.TrainingMode.PRESERVE,
    )
    return f.getvalue()


def default_hooked(model):
    return [n for n, m in model.named_modules() if n and isinstance(m, HOOKED)]


def export_and_map(model, x, opset, path, names=None, dynamic=True, constant_folding=False):
    """Export ``model`` to ``path`` and map each hooked module to its ONNX node.

    Returns (onnx model, mapping {module name: (node, output index)}, captured
    torch outputs {module name: tensor}, final torch output)."""
    model.eval()
    names = default_hooked(model) if names is None else list(names)
    shipped = onnx.load_from_string(
        _export_bytes(model, (x,), opset, ["output"], dynamic, constant_folding)
    )
    probe = _Probe(model, names).eval()
    pnames = ["output"] + ["probe_%d" % i for i in range(len(names))]
    wrapped = onnx.load_from_string(
        _export_bytes(probe, (x,), opset, pnames, dynamic, constant_folding)
    )

    graph_outputs = set(pnames)

    def core(nodes):
        # Identity nodes the exporter adds to duplicate a graph output.
        return [n for n in nodes if not (n.op_type == "Identity" and n.output[0] in graph_outputs
                                         and n.input[0] in graph_outputs)]

    s_nodes = core(list(shipped.graph.node))
    w_nodes = core(list(wrapped.graph.node))
    if [n.op_type for n in s_nodes] != [n.op_type for n in w_nodes]:
        raise RuntimeError("graphs of %s do not align" % path)
    producer = {}
    for i, n in enumerate(w_nodes):
        for j, o in enumerate(n.output):
            producer[o] = (i, j)
    # Identity nodes that copy one graph output into another
    alias = {n.output[0]: n.input[0] for n in wrapped.graph.node
             if n.op_type == "Identity" and n.output[0] in graph_outputs and n.input[0] in graph_outputs}

    mapping = {}
    for k, name in enumerate(names):
        t = "probe_%d" % k
        while t not in producer:
            t = alias[t]
        i, j = producer[t]
        mapping[name] = (s_nodes[i], j)

    with torch.no_grad():
        outs = probe(x)
    captured = {n: outs[k + 1].detach() for k, n in enumerate(names)}
    final = outs[0].detach()

    onnx.checker.check_model(shipped)
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    onnx.save(shipped, str(path))
    return shipped, mapping, captured, final


def model_opset(m):
    return [o.version for o in m.opset_import if o.domain in ("", "ai.onnx")][0]


def op_types(m):
    return sorted({n.op_type for n in m.graph.node})


# --------------------------------------------------------------------------
# statistics


def _f(v):
    v = float(v)
    if not np.isfinite(v):
        return None
    return v


def dead_fraction(y, axis):
    y = np.asarray(y)
    axis = axis % y.ndim
    other = tuple(a for a in range(y.ndim) if a != axis)
    alive = (y > 0).any(axis=other)
    return float(1.0 - alive.mean())


def saturated_fraction(y, kind):
    y = np.asarray(y, dtype=np.float64)
    if kind == "tanh":
        return float((np.abs(y) > 0.99).mean())
    return float(((y < 0.01) | (y > 0.99)).mean())


def layer_stats(y, unit_axis, relu_family=False, saturation=None):
    a = np.asarray(y, dtype=np.float64)
    d = {
        "shape": list(a.shape),
        "count": int(a.size),
        "mean": _f(a.mean()),
        "std": _f(a.std()),
        "min": _f(a.min()),
        "max": _f(a.max()),
        "zero_fraction": float((a == 0).mean()),
        "nonfinite": int((~np.isfinite(a)).sum()),
        "unit_axis": unit_axis,
        "units": int(a.shape[unit_axis]),
        "dead_fraction": dead_fraction(a, unit_axis) if relu_family else None,
        "saturated_fraction": saturated_fraction(a, saturation) if saturation else None,
    }
    return d


def _infer_shapes(m):
    try:
        inf = onnx.shape_inference.infer_shapes(m)
    except Exception:  # pragma: no cover - shape inference is best effort
        return {}
    shapes = {}
    for vi in list(inf.graph.value_info) + list(inf.graph.output):
        t = vi.type.tensor_type
        if not t.HasField("shape"):
            continue
        dims = []
        for d in t.shape.dim:
            dims.append(d.dim_value if d.HasField("dim_value") else None)
        shapes[vi.name] = dims
    return shapes


def build_layers(onnx_model, mapping, captured, modules, unit_axis_of):
    """Golden layer records in module order, with checked node mapping."""
    by_name = {n.name: n for n in onnx_model.graph.node}
    shapes = _infer_shapes(onnx_model)
    layers = []
    for name, (node, j) in mapping.items():
        mod = modules[name]
        assert node.name in by_name and by_name[node.name].op_type == node.op_type, name
        out = node.output[j]
        y = captured[name].numpy()
        if y.dtype.kind == "f":
            y = y.astype(np.float32)
        ax = unit_axis_of(name, mod, y)
        sat = "tanh" if isinstance(mod, nn.Tanh) else "sigmoid" if isinstance(mod, nn.Sigmoid) else None
        rec = {"module": name, "module_type": type(mod).__name__, "onnx_node": node.name,
               "onnx_output": out, "op": node.op_type}
        rec.update(layer_stats(y, ax, isinstance(mod, RELU_FAMILY), sat))
        if out in shapes:
            inferred = shapes[out]
            if len(inferred) == y.ndim:
                for a, b in zip(inferred[1:], y.shape[1:]):
                    if a not in (None, 0) and a != b:
                        raise RuntimeError("shape mismatch for %s: %s vs %s" % (name, inferred, y.shape))
        layers.append(rec)
    return layers


def default_unit_axis(sequence_modules=()):
    """unit axis: 1 for conv-shaped outputs, -1 for dense and token outputs."""

    def f(name, mod, y):
        if y.ndim <= 2:
            return -1
        for prefix in sequence_modules:
            if name == prefix or name.startswith(prefix + "."):
                return -1
        return 1

    return f


def _identical_rows(w):
    rows = w.reshape(w.shape[0], -1)
    nonzero = [i for i in range(rows.shape[0]) if np.any(rows[i] != 0)]
    groups = {}
    for i in nonzero:
        groups.setdefault(rows[i].tobytes(), []).append(i)
    identical = sum(len(g) for g in groups.values() if len(g) > 1)
    return identical, len(groups) + (1 if len(nonzero) < rows.shape[0] else 0), rows.shape[0] - len(nonzero)


def build_weights(onnx_model, model):
    """Weight records for Conv/Linear modules, matched to initializers by value."""
    inits = {i.name: onnx.numpy_helper.to_array(i) for i in onnx_model.graph.initializer}
    consumers = {}
    for n in onnx_model.graph.node:
        for k, i in enumerate(n.input):
            consumers.setdefault(i, []).append((n, k))
    # Identity nodes that alias an initializer (exporter deduplication)
    for n in onnx_model.graph.node:
        if n.op_type == "Identity" and n.input[0] in inits and n.output[0] not in inits:
            inits[n.output[0]] = inits[n.input[0]]
    out = []
    for name, mod in model.named_modules():
        if not isinstance(mod, (nn.Conv1d, nn.Conv2d, nn.Linear)):
            continue
        w = mod.weight.detach().numpy().astype(np.float32)
        found, layout = None, None
        for iname, arr in inits.items():
            if iname in consumers and arr.shape == w.shape and np.array_equal(arr, w):
                if found is None or iname == name + ".weight":
                    found, layout = iname, "as_torch"
        if found is None and w.ndim == 2:
            for iname, arr in inits.items():
                if iname in consumers and arr.shape == w.T.shape and np.array_equal(arr, w.T):
                    found, layout = iname, "transposed"
        node = None
        if found is not None:
            cs = [c for c in consumers.get(found, []) if c[0].op_type in ("Conv", "Gemm", "MatMul")]
            if cs:
                node = cs[0][0].name
            else:  # weight goes through a Transpose first
                for c, _ in consumers.get(found, []):
                    if c.op_type == "Transpose":
                        cs = [d for d in consumers.get(c.output[0], []) if d[0].op_type == "MatMul"]
                        if cs:
                            node = cs[0][0].name
                            layout = "transposed_in_graph"
        fan_in = int(np.prod(w.shape[1:]))
        ident, distinct, zero = _identical_rows(w)
        out.append({
            "module": name,
            "param": name + ".weight",
            "onnx_initializer": found,
            "onnx_layout": layout,
            "node": node,
            "shape": list(w.shape),
            "fan_in": fan_in,
            "mean": float(w.astype(np.float64).mean()),
            "std": float(w.astype(np.float64).std()),
            "gain": float(w.astype(np.float64).std() * np.sqrt(fan_in)),
            "rows": int(w.shape[0]),
            "identical_rows": ident,
            "distinct_rows": distinct,
            "zero_rows": zero,
        })
    return out


def batchnorm_records(model, inputs_captured, mapping):
    """Per BatchNorm: sample statistics of its input vs the stored running stats."""
    recs = []
    for name, mod in model.named_modules():
        if not isinstance(mod, (nn.BatchNorm1d, nn.BatchNorm2d)) or name not in inputs_captured:
            continue
        x = inputs_captured[name].numpy().astype(np.float64)
        axes = tuple(a for a in range(x.ndim) if a != 1)
        mu = x.mean(axis=axes)
        var = x.var(axis=axes)
        rm = mod.running_mean.detach().numpy().astype(np.float64)
        rv = mod.running_var.detach().numpy().astype(np.float64)
        shift = np.abs(mu - rm) / np.sqrt(rv)
        ratio = var / rv
        node = mapping[name][0].name if name in mapping else None
        recs.append({
            "module": name,
            "onnx_node": node,
            "channels": int(x.shape[1]),
            "epsilon": float(mod.eps),
            "input_mean": [float(v) for v in mu],
            "input_var": [float(v) for v in var],
            "running_mean": [float(v) for v in rm],
            "running_var": [float(v) for v in rv],
            "max_abs_mean_shift_over_running_std": float(shift.max()),
            "var_ratio_min": float(ratio.min()),
            "var_ratio_max": float(ratio.max()),
            "drifted_channels": int(((shift > 1) | (ratio < 0.25) | (ratio > 4)).sum()),
            "definition": "input_mean/input_var: population statistics of the BatchNormalization "
                          "input over all axes except 1; shift = |input_mean-running_mean|/sqrt(running_var); "
                          "ratio = input_var/running_var; drifted = shift>1 or ratio outside [0.25,4]",
        })
    return recs


def capture_inputs(model, names, x):
    """Inputs of the named modules (for BatchNorm drift statistics)."""
    mods = dict(model.named_modules())
    got = {}
    hs = [mods[n].register_forward_hook(lambda m, i, o, n=n: got.__setitem__(n, i[0].detach()))
          for n in names]
    with torch.no_grad():
        model(x)
    for h in hs:
        h.remove()
    return got


def write_json(path, obj):
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w") as f:
        json.dump(obj, f, indent=1, sort_keys=False)
        f.write("\n")


def golden(name, onnx_model, model, x, final, layers, weights, extra=None,
           input_file=None, output_file=None):
    d = {
        "model": name + ".onnx",
        "opset": model_opset(onnx_model),
        "input": input_file or (name + ".input.npy"),
        "input_name": onnx_model.graph.input[0].name,
        "input_dtype": str(np.asarray(x).dtype),
        "input_shape": list(np.asarray(x).shape),
        "output": output_file or (name + ".output.npy"),
        "output_name": onnx_model.graph.output[0].name,
        "output_shape": list(final.shape),
        "source": SOURCE,
        "torch_version": TORCH_VERSION,
        "onnx_version": onnx.__version__,
        "op_types": op_types(onnx_model),
        "nodes": len(onnx_model.graph.node),
        "saturation_definition": "elements",
        "saturation_definition_text": SATURATION_DEFINITION,
        "dead_definition": DEAD_DEFINITION,
        "unit_axis_definition": UNIT_AXIS_DEFINITION,
        "std_definition": "population standard deviation (ddof=0) over all elements, float64 accumulation",
        "layers": layers,
        "weights": weights,
    }
    if extra:
        d.update(extra)
    return d


def update_index(entries, kind):
    """Replace the entries of one kind in testdata/ref/index.json, keep the others."""
    path = REF / "index.json"
    data = {"description": "reference and pathology models for vitals tests; files are relative "
                           "to testdata/ref; see testdata/gen/README.md",
            "source": SOURCE, "models": []}
    if path.exists():
        with open(path) as f:
            data = json.load(f)
    order = {"reference": 0, "pathology": 1}
    models = [m for m in data["models"] if m.get("kind") != kind] + list(entries)
    models.sort(key=lambda m: order.get(m.get("kind"), 9))
    data["models"] = models
    data["source"] = SOURCE
    write_json(path, data)
