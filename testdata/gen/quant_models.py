"""Quantized test models for vitals, built with the ONNX Python API from our own
small float model, plus NumPy reference values.

Writes testdata/quant/:
  fp32.onnx          float CNN: Conv-Relu-Conv(stride 2)-Relu-Flatten-MatMul-Add
  qdq.onnx           QDQ format: per-channel int8 weights, per-tensor uint8
                     activations (input, relu1, relu2) calibrated by min/max on
                     the sample (range widened to include 0)
  qdq_badscale.onnx  the same with relu2's scale ten times too small (18.8% of
                     its values, 36% of the non-zero ones, clip)
  dynamic.onnx       DynamicQuantizeLinear + ConvInteger / MatMulInteger
  qop.onnx           operator-oriented: QuantizeLinear, QLinearConv (int32
                     bias, Relu folded into the uint8 output range),
                     QLinearMatMul, DequantizeLinear
  qop_ms.onnx        the com.microsoft operators quantization tools emit:
                     QLinearConv then QLinearLeakyRelu, QLinearSigmoid,
                     QLinearAdd, QLinearMul, QLinearConcat,
                     QLinearGlobalAveragePool, QGemm (quantized and float
                     output); every intermediate is a graph output
  fp16.onnx          the float CNN in float16 (Cast, float16 weights) with one
                     activation beyond 65504 and one below the smallest normal
                     float16 in large shares
  reference.json     NumPy reference: per quantized activation of the QDQ
                     models the clipped share and the share of integer levels
                     used over the whole sample, and per layer the SQNR of the
                     QDQ model against the float model
The sample is testdata/ref/digits_sample_nchw.npy (512 images, see README.md).
Outputs of ONNX Runtime for these models are written by quant_ort.js.

Run: /usr/bin/python3 testdata/gen/quant_models.py   (numpy, onnx 1.12)
"""

import json
from pathlib import Path

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

REPO = Path(__file__).resolve().parents[2]
OUT = REPO / "testdata" / "quant"
SAMPLE = REPO / "testdata" / "ref" / "digits_sample_nchw.npy"

rng = np.random.default_rng(17)


# ---------------------------------------------------------------- NumPy ops


def conv2d(x, w, b, stride=1, pad=1):
    """Cross-correlation as ONNX Conv (NCHW, OIHW), float64 accumulation."""
    n, c, h, wd = x.shape
    m, _, kh, kw = w.shape
    xp = np.pad(x, ((0, 0), (0, 0), (pad, pad), (pad, pad)))
    oh = (h + 2 * pad - kh) // stride + 1
    ow = (wd + 2 * pad - kw) // stride + 1
    cols = np.empty((n, c, kh, kw, oh, ow), dtype=np.float64)
    for i in range(kh):
        for j in range(kw):
            cols[:, :, i, j] = xp[:, :, i:i + stride * oh:stride, j:j + stride * ow:stride]
    y = np.einsum("nckluv,mckl->nmuv", cols, w.astype(np.float64))
    if b is not None:
        y = y + b.reshape(1, -1, 1, 1)
    return y


def quantize(x, scale, zp, lo=0, hi=255):
    """ONNX QuantizeLinear: saturate(round_half_even(x / scale) + zp), quotient in float32."""
    q = np.rint(x.astype(np.float32) / np.float32(scale)) + zp
    return np.clip(q, lo, hi)


def dequantize(q, scale, zp):
    return ((q - zp).astype(np.float32) * np.float32(scale)).astype(np.float32)


def minmax_params(x):
    """uint8 asymmetric min/max calibration with the range widened to include 0 (common practice)."""
    lo, hi = min(0.0, float(x.min())), max(0.0, float(x.max()))
    scale = np.float32((hi - lo) / 255.0)
    zp = int(np.clip(np.rint(-lo / scale), 0, 255))
    return scale, zp


def sym_int8_per_channel(w, axis):
    """Symmetric int8 per-channel weights: scale = max|w| / 127 along every slice of axis."""
    red = tuple(i for i in range(w.ndim) if i != axis)
    s = (np.abs(w).max(axis=red) / 127.0).astype(np.float32)
    shape = [1] * w.ndim
    shape[axis] = -1
    q = np.clip(np.rint(w / s.reshape(shape)), -127, 127).astype(np.int8)
    return q, s


# ---------------------------------------------------------------- float model

W1 = (rng.standard_normal((8, 1, 3, 3)) * np.sqrt(2 / 9)).astype(np.float32)
B1 = (rng.standard_normal(8) * 0.1).astype(np.float32)
W2 = (rng.standard_normal((16, 8, 3, 3)) * np.sqrt(2 / 72)).astype(np.float32)
B2 = (rng.standard_normal(16) * 0.1).astype(np.float32)
W3 = (rng.standard_normal((256, 10)) * np.sqrt(1 / 256)).astype(np.float32)
B3 = (rng.standard_normal(10) * 0.1).astype(np.float32)


def float_forward(x):
    t = {}
    t["conv1"] = conv2d(x, W1, B1).astype(np.float32)
    t["relu1"] = np.maximum(t["conv1"], 0)
    t["conv2"] = conv2d(t["relu1"], W2, B2, stride=2).astype(np.float32)
    t["relu2"] = np.maximum(t["conv2"], 0)
    t["flat"] = t["relu2"].reshape(len(x), -1)
    t["fc"] = (t["flat"].astype(np.float64) @ W3).astype(np.float32)
    t["output"] = t["fc"] + B3
    return t


def vi(name, elem, shape):
    return helper.make_tensor_value_info(name, elem, shape)


def init(name, arr):
    return numpy_helper.from_array(np.asarray(arr), name)


def save(model, name):
    model.producer_name = "vitals testdata/gen/quant_models.py"
    onnx.checker.check_model(model)
    onnx.save(model, str(OUT / name))


def float_model():
    nodes = [
        helper.make_node("Conv", ["input", "W1", "B1"], ["conv1"], name="conv1", pads=[1, 1, 1, 1]),
        helper.make_node("Relu", ["conv1"], ["relu1"], name="relu1"),
        helper.make_node("Conv", ["relu1", "W2", "B2"], ["conv2"], name="conv2", pads=[1, 1, 1, 1], strides=[2, 2]),
        helper.make_node("Relu", ["conv2"], ["relu2"], name="relu2"),
        helper.make_node("Flatten", ["relu2"], ["flat"], name="flat"),
        helper.make_node("MatMul", ["flat", "W3"], ["fc"], name="fc"),
        helper.make_node("Add", ["fc", "B3"], ["output"], name="bias"),
    ]
    g = helper.make_graph(nodes, "digits_cnn", [vi("input", TensorProto.FLOAT, ["N", 1, 8, 8])],
                          [vi("output", TensorProto.FLOAT, ["N", 10])],
                          [init("W1", W1), init("B1", B1), init("W2", W2), init("B2", B2), init("W3", W3), init("B3", B3)])
    return helper.make_model(g, opset_imports=[helper.make_opsetid("", 13)])


# ---------------------------------------------------------------- QDQ models

Q1, S1 = sym_int8_per_channel(W1, 0)
Q2, S2 = sym_int8_per_channel(W2, 0)
Q3, S3 = sym_int8_per_channel(W3, 1)
WEIGHTS = {"W1": (Q1, S1, 0), "W2": (Q2, S2, 0), "W3": (Q3, S3, 1)}
ACTS = ["input", "relu1", "relu2"]


def qdq_model(act_params):
    """act_params: tensor → (scale, zero point); weights per channel int8."""
    nodes, inits = [], [init("B1", B1), init("B2", B2), init("B3", B3)]
    for w, (q, s, axis) in WEIGHTS.items():
        inits += [init(w + "_quantized", q), init(w + "_scale", s), init(w + "_zero_point", np.zeros(len(s), np.int8))]
        nodes.append(helper.make_node("DequantizeLinear", [w + "_quantized", w + "_scale", w + "_zero_point"], [w],
                                      name=w + "_DequantizeLinear", axis=axis))
    def qdq(a):
        s, z = act_params[a]
        inits.extend([init(a + "_scale", np.float32(s)), init(a + "_zero_point", np.uint8(z))])
        return [helper.make_node("QuantizeLinear", [a, a + "_scale", a + "_zero_point"], [a + "_quantized"], name=a + "_QuantizeLinear"),
                helper.make_node("DequantizeLinear", [a + "_quantized", a + "_scale", a + "_zero_point"], [a + "_dequantized"],
                                 name=a + "_DequantizeLinear")]
    nodes += qdq("input") + [
        helper.make_node("Conv", ["input_dequantized", "W1", "B1"], ["conv1"], name="conv1", pads=[1, 1, 1, 1]),
        helper.make_node("Relu", ["conv1"], ["relu1"], name="relu1")] + qdq("relu1") + [
        helper.make_node("Conv", ["relu1_dequantized", "W2", "B2"], ["conv2"], name="conv2", pads=[1, 1, 1, 1], strides=[2, 2]),
        helper.make_node("Relu", ["conv2"], ["relu2"], name="relu2")] + qdq("relu2") + [
        helper.make_node("Flatten", ["relu2_dequantized"], ["flat"], name="flat"),
        helper.make_node("MatMul", ["flat", "W3"], ["fc"], name="fc"),
        helper.make_node("Add", ["fc", "B3"], ["output"], name="bias"),
    ]
    g = helper.make_graph(nodes, "digits_cnn_qdq", [vi("input", TensorProto.FLOAT, ["N", 1, 8, 8])],
                          [vi("output", TensorProto.FLOAT, ["N", 10])], inits)
    return helper.make_model(g, opset_imports=[helper.make_opsetid("", 13)])


def qdq_forward(x, act_params):
    """NumPy forward of qdq_model: the same graph, value by value."""
    w = {k: dequantize(q.astype(np.float64), s.reshape([-1 if i == ax else 1 for i in range(q.ndim)]), 0)
         for k, (q, s, ax) in WEIGHTS.items()}
    qd = {}

    def qdq(name, v):
        s, z = act_params[name]
        q = quantize(v, s, z)
        qd[name] = q
        return dequantize(q, s, z)

    t = {}
    xin = qdq("input", x)
    t["conv1"] = conv2d(xin, w["W1"], B1).astype(np.float32)
    t["relu1"] = np.maximum(t["conv1"], 0)
    t["conv2"] = conv2d(qdq("relu1", t["relu1"]), w["W2"], B2, stride=2).astype(np.float32)
    t["relu2"] = np.maximum(t["conv2"], 0)
    t["flat"] = qdq("relu2", t["relu2"]).reshape(len(x), -1)
    t["fc"] = (t["flat"].astype(np.float64) @ w["W3"]).astype(np.float32)
    t["output"] = t["fc"] + B3
    return t, qd


def quant_health(x_float, scale, zp):
    """Clipped share: round(x/scale)+zp outside [0, 255]; levels used: distinct integer values after saturation / 256."""
    r = np.rint(x_float.astype(np.float32) / np.float32(scale)) + zp
    clipped = float(np.mean((r < 0) | (r > 255)))
    levels = len(np.unique(np.clip(r, 0, 255))) / 256.0
    return clipped, levels


def sqnr_db(x, xq):
    """SQNR = 10·log10(Σx² / Σ(x − x̂)²) in dB (the standard signal-to-quantization-noise ratio)."""
    x, xq = x.astype(np.float64), xq.astype(np.float64)
    return float(10 * np.log10(np.sum(x * x) / np.sum((x - xq) ** 2)))


# ---------------------------------------------------------------- dynamic model


def u8_per_tensor(w):
    """uint8 asymmetric per-tensor weights (min/max including 0)."""
    s, z = minmax_params(w)
    return quantize(w, s, z).astype(np.uint8), s, z


def dynamic_model():
    nodes, inits = [], []
    # conv layers: DynamicQuantizeLinear → ConvInteger → Cast → Mul(x_scale·w_scale) → Add(bias)
    src = "input"
    for i, (w, b, stride, relu) in enumerate([(W1, B1, 1, True), (W2, B2, 2, True)], 1):
        q, s, z = u8_per_tensor(w)
        p = f"conv{i}"
        inits += [init(p + "_W_quantized", q), init(p + "_W_scale", np.float32(s)), init(p + "_W_zero_point", np.uint8(z)),
                  init(p + "_B", b.reshape(1, -1, 1, 1))]
        nodes += [
            helper.make_node("DynamicQuantizeLinear", [src], [src + "_quantized", src + "_scale", src + "_zero_point"],
                             name=src + "_DynamicQuantizeLinear"),
            helper.make_node("ConvInteger", [src + "_quantized", p + "_W_quantized", src + "_zero_point", p + "_W_zero_point"],
                             [p + "_int32"], name=p + "_quant", pads=[1, 1, 1, 1], strides=[stride, stride]),
            helper.make_node("Cast", [p + "_int32"], [p + "_float"], name=p + "_cast", to=TensorProto.FLOAT),
            helper.make_node("Mul", [src + "_scale", p + "_W_scale"], [p + "_scale"], name=p + "_scale_mul"),
            helper.make_node("Mul", [p + "_float", p + "_scale"], [p + "_scaled"], name=p + "_rescale"),
            helper.make_node("Add", [p + "_scaled", p + "_B"], [p], name=p),
            helper.make_node("Relu", [p], [f"relu{i}"], name=f"relu{i}"),
        ]
        src = f"relu{i}"
    q, s, z = u8_per_tensor(W3)
    inits += [init("fc_W_quantized", q), init("fc_W_scale", np.float32(s)), init("fc_W_zero_point", np.uint8(z)), init("B3", B3)]
    nodes += [
        helper.make_node("Flatten", ["relu2"], ["flat"], name="flat"),
        helper.make_node("DynamicQuantizeLinear", ["flat"], ["flat_quantized", "flat_scale", "flat_zero_point"], name="flat_DynamicQuantizeLinear"),
        helper.make_node("MatMulInteger", ["flat_quantized", "fc_W_quantized", "flat_zero_point", "fc_W_zero_point"], ["fc_int32"], name="fc_quant"),
        helper.make_node("Cast", ["fc_int32"], ["fc_float"], name="fc_cast", to=TensorProto.FLOAT),
        helper.make_node("Mul", ["flat_scale", "fc_W_scale"], ["fc_scale"], name="fc_scale_mul"),
        helper.make_node("Mul", ["fc_float", "fc_scale"], ["fc"], name="fc"),
        helper.make_node("Add", ["fc", "B3"], ["output"], name="bias"),
    ]
    g = helper.make_graph(nodes, "digits_cnn_dynamic", [vi("input", TensorProto.FLOAT, ["N", 1, 8, 8])],
                          [vi("output", TensorProto.FLOAT, ["N", 10])], inits)
    return helper.make_model(g, opset_imports=[helper.make_opsetid("", 13)])


# ---------------------------------------------------------------- operator-oriented models


def qop_model(act_params):
    s_in, z_in = act_params["input"]
    s_r1, z_r1 = act_params["relu1"]
    s_r2, z_r2 = act_params["relu2"]
    s3t = np.float32(np.abs(W3).max() / 127.0)  # QLinearMatMul: per-tensor weight scale
    q3 = np.clip(np.rint(W3 / s3t), -127, 127).astype(np.int8)
    fc_lo, fc_hi = -8.0, 8.0
    s_fc = np.float32((fc_hi - fc_lo) / 255)
    z_fc = int(np.rint(-fc_lo / s_fc))
    inits = [
        init("input_scale", np.float32(s_in)), init("input_zero_point", np.uint8(z_in)),
        init("W1_quantized", Q1), init("W1_scale", S1), init("W1_zero_point", np.zeros(8, np.int8)),
        init("B1_quantized", np.rint(B1 / (np.float32(s_in) * S1)).astype(np.int32)),
        init("relu1_scale", np.float32(s_r1)), init("relu1_zero_point", np.uint8(z_r1)),
        init("W2_quantized", Q2), init("W2_scale", S2), init("W2_zero_point", np.zeros(16, np.int8)),
        init("B2_quantized", np.rint(B2 / (np.float32(s_r1) * S2)).astype(np.int32)),
        init("relu2_scale", np.float32(s_r2)), init("relu2_zero_point", np.uint8(z_r2)),
        init("W3_quantized", q3), init("W3_scale", s3t), init("W3_zero_point", np.int8(0)),
        init("fc_scale", s_fc), init("fc_zero_point", np.uint8(z_fc)), init("B3", B3),
    ]
    nodes = [
        helper.make_node("QuantizeLinear", ["input", "input_scale", "input_zero_point"], ["input_quantized"], name="input_QuantizeLinear"),
        helper.make_node("QLinearConv", ["input_quantized", "input_scale", "input_zero_point", "W1_quantized", "W1_scale", "W1_zero_point",
                                         "relu1_scale", "relu1_zero_point", "B1_quantized"], ["relu1_quantized"], name="conv1_quant", pads=[1, 1, 1, 1]),
        helper.make_node("QLinearConv", ["relu1_quantized", "relu1_scale", "relu1_zero_point", "W2_quantized", "W2_scale", "W2_zero_point",
                                         "relu2_scale", "relu2_zero_point", "B2_quantized"], ["relu2_quantized"], name="conv2_quant",
                         pads=[1, 1, 1, 1], strides=[2, 2]),
        helper.make_node("Flatten", ["relu2_quantized"], ["flat_quantized"], name="flat"),
        helper.make_node("QLinearMatMul", ["flat_quantized", "relu2_scale", "relu2_zero_point", "W3_quantized", "W3_scale", "W3_zero_point",
                                           "fc_scale", "fc_zero_point"], ["fc_quantized"], name="fc_quant"),
        helper.make_node("DequantizeLinear", ["fc_quantized", "fc_scale", "fc_zero_point"], ["fc"], name="fc_DequantizeLinear"),
        helper.make_node("Add", ["fc", "B3"], ["output"], name="bias"),
    ]
    g = helper.make_graph(nodes, "digits_cnn_qop", [vi("input", TensorProto.FLOAT, ["N", 1, 8, 8])],
                          [vi("output", TensorProto.FLOAT, ["N", 10]), vi("relu1_quantized", TensorProto.UINT8, ["N", 8, 8, 8]),
                           vi("relu2_quantized", TensorProto.UINT8, ["N", 16, 4, 4]), vi("fc_quantized", TensorProto.UINT8, ["N", 10])],
                          inits)
    return helper.make_model(g, opset_imports=[helper.make_opsetid("", 13)])


def qop_ms_model(x, act_params):
    """com.microsoft quantized operators on top of one QLinearConv; scales from NumPy float ranges."""
    s_in, z_in = act_params["input"]
    c1 = conv2d(x, W1, B1)
    s_c, z_c = minmax_params(c1)
    lr = np.where(c1 >= 0, c1, 0.1 * c1)
    s_lr, z_lr = minmax_params(lr)
    s_sg, z_sg = np.float32(1 / 255), 0
    s_ad, z_ad = minmax_params(lr + 1)
    s_mu, z_mu = minmax_params(lr)
    s_cc, z_cc = minmax_params(np.concatenate([lr + 1, lr]))
    s_gp, z_gp = minmax_params(np.concatenate([lr + 1, lr], axis=1).mean(axis=(2, 3)))
    wg = (rng.standard_normal((10, 16)) * 0.25).astype(np.float32)
    qg, sg = sym_int8_per_channel(wg, 0)  # one scale per output column (B is [N, K] with transB)
    bg = (rng.standard_normal(10) * 0.1).astype(np.float32)
    s_y, z_y = np.float32(6 / 255), 128
    inits = [
        init("input_scale", np.float32(s_in)), init("input_zero_point", np.uint8(z_in)),
        init("W1_quantized", Q1), init("W1_scale", S1), init("W1_zero_point", np.zeros(8, np.int8)),
        init("B1_quantized", np.rint(B1 / (np.float32(s_in) * S1)).astype(np.int32)),
    ]
    for n, s, z in [("c1", s_c, z_c), ("lr", s_lr, z_lr), ("sg", s_sg, z_sg), ("ad", s_ad, z_ad), ("mu", s_mu, z_mu),
                    ("cc", s_cc, z_cc), ("gp", s_gp, z_gp), ("y", s_y, z_y)]:
        inits += [init(n + "_scale", np.float32(s)), init(n + "_zero_point", np.uint8(z))]
    inits += [init("G_quantized", qg), init("G_scale", sg), init("G_zero_point", np.zeros(10, np.int8)),
              init("G_bias", np.rint(bg / (np.float32(s_gp) * sg)).astype(np.int32))]
    ms = "com.microsoft"
    nodes = [
        helper.make_node("QuantizeLinear", ["input", "input_scale", "input_zero_point"], ["xq"], name="input_QuantizeLinear"),
        helper.make_node("QLinearConv", ["xq", "input_scale", "input_zero_point", "W1_quantized", "W1_scale", "W1_zero_point",
                                         "c1_scale", "c1_zero_point", "B1_quantized"], ["c1"], name="conv1_quant", pads=[1, 1, 1, 1]),
        helper.make_node("QLinearLeakyRelu", ["c1", "c1_scale", "c1_zero_point", "lr_scale", "lr_zero_point"], ["lr"], name="leaky", domain=ms, alpha=0.1),
        helper.make_node("QLinearSigmoid", ["c1", "c1_scale", "c1_zero_point", "sg_scale", "sg_zero_point"], ["sg"], name="sigmoid", domain=ms),
        helper.make_node("QLinearAdd", ["lr", "lr_scale", "lr_zero_point", "sg", "sg_scale", "sg_zero_point", "ad_scale", "ad_zero_point"],
                         ["ad"], name="add", domain=ms),
        helper.make_node("QLinearMul", ["lr", "lr_scale", "lr_zero_point", "sg", "sg_scale", "sg_zero_point", "mu_scale", "mu_zero_point"],
                         ["mu"], name="mul", domain=ms),
        helper.make_node("QLinearConcat", ["cc_scale", "cc_zero_point", "ad", "ad_scale", "ad_zero_point", "mu", "mu_scale", "mu_zero_point"],
                         ["cc"], name="concat", domain=ms, axis=1),
        helper.make_node("QLinearGlobalAveragePool", ["cc", "cc_scale", "cc_zero_point", "gp_scale", "gp_zero_point"], ["gp"], name="gap",
                         domain=ms, channels_last=0),
        helper.make_node("Flatten", ["gp"], ["gpf"], name="gap_flat"),
        helper.make_node("QGemm", ["gpf", "gp_scale", "gp_zero_point", "G_quantized", "G_scale", "G_zero_point", "G_bias", "y_scale", "y_zero_point"],
                         ["qg"], name="qgemm", domain=ms, transB=1),
        helper.make_node("QGemm", ["gpf", "gp_scale", "gp_zero_point", "G_quantized", "G_scale", "G_zero_point", "G_bias"],
                         ["qgf"], name="qgemm_float", domain=ms, transB=1, alpha=0.5),
        helper.make_node("DequantizeLinear", ["qg", "y_scale", "y_zero_point"], ["output"], name="output_DequantizeLinear"),
    ]
    U8 = TensorProto.UINT8
    outs = [vi("output", TensorProto.FLOAT, ["N", 10]), vi("c1", U8, ["N", 8, 8, 8]), vi("lr", U8, ["N", 8, 8, 8]), vi("sg", U8, ["N", 8, 8, 8]),
            vi("ad", U8, ["N", 8, 8, 8]), vi("mu", U8, ["N", 8, 8, 8]), vi("cc", U8, ["N", 16, 8, 8]), vi("gp", U8, ["N", 16, 1, 1]),
            vi("qg", U8, ["N", 10]), vi("qgf", TensorProto.FLOAT, ["N", 10])]
    g = helper.make_graph(nodes, "digits_qop_ms", [vi("input", TensorProto.FLOAT, ["N", 1, 8, 8])], outs, inits)
    m = helper.make_model(g, opset_imports=[helper.make_opsetid("", 13), helper.make_opsetid(ms, 1)])
    return m


# ---------------------------------------------------------------- float16 model

K_UP, K_TINY = np.float16(4000), np.float16(1e-5)


def fp16_model():
    """The float CNN in float16 (weights and activations), with two scalings
    that are harmless in float32 but not in float16: relu1·4000 exceeds 65504
    for relu1 > 16.4, and relu2·1e-5 falls below the smallest normal float16."""
    F16 = TensorProto.FLOAT16
    h = lambda a: np.asarray(a).astype(np.float16)
    nodes = [
        helper.make_node("Cast", ["input"], ["input_half"], name="to_half", to=F16),
        helper.make_node("Conv", ["input_half", "W1", "B1"], ["conv1"], name="conv1", pads=[1, 1, 1, 1]),
        helper.make_node("Relu", ["conv1"], ["relu1"], name="relu1"),
        helper.make_node("Mul", ["relu1", "k_up"], ["boost"], name="boost"),
        helper.make_node("Div", ["boost", "k_up"], ["unboost"], name="unboost"),
        helper.make_node("Conv", ["unboost", "W2", "B2"], ["conv2"], name="conv2", pads=[1, 1, 1, 1], strides=[2, 2]),
        helper.make_node("Relu", ["conv2"], ["relu2"], name="relu2"),
        helper.make_node("Mul", ["relu2", "k_tiny"], ["tiny"], name="tiny"),
        helper.make_node("Div", ["tiny", "k_tiny"], ["untiny"], name="untiny"),
        helper.make_node("Flatten", ["untiny"], ["flat"], name="flat"),
        helper.make_node("MatMul", ["flat", "W3"], ["fc"], name="fc"),
        helper.make_node("Add", ["fc", "B3"], ["logits_half"], name="bias"),
        helper.make_node("Cast", ["logits_half"], ["output"], name="to_float", to=TensorProto.FLOAT),
    ]
    inits = [init("W1", h(W1)), init("B1", h(B1)), init("W2", h(W2)), init("B2", h(B2)), init("W3", h(W3)), init("B3", h(B3)),
             init("k_up", K_UP), init("k_tiny", K_TINY)]
    g = helper.make_graph(nodes, "digits_cnn_half", [vi("input", TensorProto.FLOAT, ["N", 1, 8, 8])],
                          [vi("output", TensorProto.FLOAT, ["N", 10])], inits)
    return helper.make_model(g, opset_imports=[helper.make_opsetid("", 13)])


def fp16_reference(x):
    """The float16 model computed in float32 (float16 weights and input widened), as vitals runs it:
    the share of boost's values beyond 65504 and of tiny's non-zero values below 2^-14."""
    w = lambda a: a.astype(np.float16).astype(np.float32)
    xi = w(x)
    relu1 = np.maximum(conv2d(xi, w(W1), w(B1)).astype(np.float32), 0)
    boost = relu1 * np.float32(K_UP)
    relu2 = np.maximum(conv2d(boost / np.float32(K_UP), w(W2), w(B2), stride=2).astype(np.float32), 0)
    tiny = relu2 * np.float32(K_TINY)
    fmin = np.float32(2.0 ** -14)
    return {"boost": {"float16_overflow_fraction": float(np.mean(np.abs(boost) > 65504))},
            "tiny": {"float16_subnormal_fraction": float(np.mean((tiny != 0) & (np.abs(tiny) < fmin)))},
            "source": "NumPy float32 forward of fp16.onnx with float16-rounded weights and input, all %d images" % len(x)}


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    x = np.load(SAMPLE).astype(np.float32)
    ft = float_forward(x)
    params = {"input": minmax_params(x), "relu1": minmax_params(ft["relu1"])}
    # relu2 is calibrated on the model with input and relu1 already quantized (as calibration tools do layer by layer)
    t_partial, _ = qdq_forward(x, {**params, "relu2": (np.float32(1), 0)})
    params["relu2"] = minmax_params(t_partial["relu2"])
    bad = dict(params)
    bad["relu2"] = (np.float32(params["relu2"][0] / 10), params["relu2"][1])

    save(float_model(), "fp32.onnx")
    save(qdq_model(params), "qdq.onnx")
    save(qdq_model(bad), "qdq_badscale.onnx")
    save(dynamic_model(), "dynamic.onnx")
    save(qop_model(params), "qop.onnx")
    save(qop_ms_model(x, params), "qop_ms.onnx")
    save(fp16_model(), "fp16.onnx")

    ref = {"source": "NumPy %s (testdata/gen/quant_models.py); sample testdata/ref/digits_sample_nchw.npy, all %d images" % (np.__version__, len(x)),
           "clipped_definition": "share of values v with round_half_even(v/scale)+zero_point outside [0, 255]",
           "levels_definition": "distinct saturated integer values / 256",
           "sqnr_definition": "10*log10(sum x^2 / sum (x - xq)^2) dB, x float model, xq quantized model, same tensor name, whole sample"}
    for name, p in [("qdq", params), ("qdq_badscale", bad)]:
        t, _ = qdq_forward(x, p)
        # the float tensor each quantizer reads, in this model
        src = {"input": x, "relu1": t["relu1"], "relu2": t["relu2"]}
        entry = {"quant": {}, "sqnr_db": {}}
        for a in ACTS:
            s, z = p[a]
            c, lv = quant_health(src[a], s, z)
            entry["quant"][a] = {"scale": float(s), "zero_point": int(z), "clipped_fraction": c, "levels_used_fraction": lv}
        for k in ["conv1", "relu1", "conv2", "relu2", "flat", "fc", "output"]:
            entry["sqnr_db"][k] = sqnr_db(ft[k], t[k])
        # ‖W_dequantized − W‖/‖W‖ of each per-channel int8 weight
        entry["weight_relative_change"] = {}
        for k, (q, sc, ax) in WEIGHTS.items():
            wf = {"W1": W1, "W2": W2, "W3": W3}[k].astype(np.float64)
            wd = dequantize(q.astype(np.float64), sc.reshape([-1 if i == ax else 1 for i in range(q.ndim)]), 0).astype(np.float64)
            entry["weight_relative_change"][k] = float(np.linalg.norm(wd - wf) / np.linalg.norm(wf))
        # each Q/DQ pair's output against the float tensor it quantizes
        _, qd = qdq_forward(x, p)
        for a in ["relu1", "relu2"]:
            s, z = p[a]
            entry["sqnr_db"][a + "_dequantized"] = sqnr_db(ft[a], dequantize(qd[a], s, z))
        ref[name] = entry
    ref["fp16"] = fp16_reference(x)
    with open(OUT / "reference.json", "w") as f:
        json.dump(ref, f, indent=1, sort_keys=True)
        f.write("\n")
    print(json.dumps({k: ref[k] for k in ("qdq", "qdq_badscale")}, indent=1))


if __name__ == "__main__":
    main()
