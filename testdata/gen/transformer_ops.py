"""Writes one-node models for the transformer operators and their inputs.

    /usr/bin/python3 testdata/gen/transformer_ops.py OUTDIR

For every case OUTDIR/<case>.onnx and OUTDIR/<case>.in<i>.npy (graph-input
order). The expected outputs come from ONNX Runtime: transformer_ops.js runs
each model and writes OUTDIR/<case>.out<i>.npy (run both through
transformer_ops.sh, which writes testdata/transformer/ops); BiasAdd, which
ONNX Runtime implements for CUDA only, gets its expected output from NumPy here. Operator semantics:
ONNX Operators.md (Attention, RotaryEmbedding, opset 23) and onnxruntime
docs/ContribOperators.md (com.microsoft). onnx 1.12 helper API and NumPy only.
"""

import sys
from pathlib import Path

import numpy as np
import onnx
from onnx import TensorProto, helper

rng = np.random.default_rng(20)
F = TensorProto.FLOAT
NP2ONNX = {np.float32: TensorProto.FLOAT, np.int64: TensorProto.INT64,
           np.int32: TensorProto.INT32, np.bool_: TensorProto.BOOL}


def r(*shape, scale=1.0):
    return (rng.standard_normal(shape) * scale).astype(np.float32)


def case(out, name, op, inputs, outputs, domain="", opset=23, **attrs):
    """inputs: list of (name, array or None); outputs: list of names ('' = absent)."""
    node_inputs = [n if a is not None else "" for n, a in inputs]
    while node_inputs and node_inputs[-1] == "":
        node_inputs.pop()
    node = helper.make_node(op, node_inputs, outputs, domain=domain, **attrs)
    g_in = [helper.make_tensor_value_info(n, NP2ONNX[a.dtype.type], a.shape) for n, a in inputs if a is not None]
    g_out = [onnx.ValueInfoProto(name=n) for n in outputs if n]
    graph = helper.make_graph([node], name, g_in, g_out)
    ops = [helper.make_operatorsetid("", opset)]
    if domain:
        ops.append(helper.make_operatorsetid(domain, 1))
    m = helper.make_model(graph, opset_imports=ops, producer_name="vitals testdata/gen/transformer_ops.py")
    m.ir_version = 10
    onnx.save(m, str(out / (name + ".onnx")))
    i = 0
    for n, a in inputs:
        if a is not None:
            np.save(out / ("%s.in%d.npy" % (name, i)), a)
            i += 1


def main(out):
    out.mkdir(parents=True, exist_ok=True)
    ms = "com.microsoft"
    # ONNX Attention (23)
    case(out, "attention_4d_causal_gqa", "Attention",
         [("Q", r(2, 4, 5, 8)), ("K", r(2, 2, 5, 8)), ("V", r(2, 2, 5, 8))], ["Y"], is_causal=1)
    mask = np.ones((2, 1, 5, 8), dtype=np.bool_)
    mask[1, :, :, 6:] = False
    case(out, "attention_3d_boolmask_past", "Attention",
         [("Q", r(2, 5, 16)), ("K", r(2, 5, 16)), ("V", r(2, 5, 16)), ("attn_mask", mask),
          ("past_key", r(2, 2, 3, 8)), ("past_value", r(2, 2, 3, 8))],
         ["Y", "present_key", "present_value"], q_num_heads=2, kv_num_heads=2)
    case(out, "attention_softcap_floatmask_probs", "Attention",
         [("Q", r(1, 2, 4, 8, scale=3)), ("K", r(1, 2, 6, 8)), ("V", r(1, 2, 6, 4)), ("attn_mask", r(4, 6))],
         ["Y", "", "", "qk"], softcap=2.0, qk_matmul_output_mode=3, scale=0.5)
    # RotaryEmbedding (23)
    pos = np.array([[0, 1, 2], [5, 6, 7]], dtype=np.int64)
    case(out, "rotary_4d_position_ids", "RotaryEmbedding",
         [("X", r(2, 4, 3, 8)), ("cos_cache", r(10, 4)), ("sin_cache", r(10, 4)), ("position_ids", pos)], ["Y"])
    case(out, "rotary_3d_interleaved_partial", "RotaryEmbedding",
         [("X", r(2, 3, 16)), ("cos_cache", r(2, 3, 2)), ("sin_cache", r(2, 3, 2))], ["Y"],
         num_heads=2, interleaved=1, rotary_embedding_dim=4)
    # com.microsoft
    case(out, "ms_rotary_offset", "RotaryEmbedding",
         [("input", r(2, 4, 16)), ("position_ids", np.array([3], dtype=np.int64)),
          ("cos_cache", r(16, 4)), ("sin_cache", r(16, 4))], ["output"], domain=ms, num_heads=2)
    case(out, "ms_rotary_4d_ids_interleaved", "RotaryEmbedding",
         [("input", r(1, 2, 3, 8)), ("position_ids", np.array([[4, 0, 9]], dtype=np.int64)),
          ("cos_cache", r(12, 4)), ("sin_cache", r(12, 4))], ["output"], domain=ms, interleaved=1)
    mi = np.ones((2, 5), dtype=np.int32)
    mi[0, 3:] = 0
    case(out, "ms_attention_mask2d", "Attention",
         [("input", r(2, 5, 12)), ("weights", r(12, 36, scale=0.4)), ("bias", r(36, scale=0.1)), ("mask_index", mi)],
         ["output"], domain=ms, num_heads=3)
    case(out, "ms_attention_causal_past", "Attention",
         [("input", r(2, 2, 12)), ("weights", r(12, 36, scale=0.4)), ("bias", r(36, scale=0.1)),
          ("mask_index", None), ("past", r(2, 2, 3, 3, 4))],
         ["output", "present"], domain=ms, num_heads=3, unidirectional=1)
    kpm = np.ones((2, 6), dtype=np.int32)
    kpm[1, 4:] = 0
    case(out, "ms_mha_cross_padding", "MultiHeadAttention",
         [("query", r(2, 4, 16)), ("key", r(2, 6, 16)), ("value", r(2, 6, 16)), ("bias", r(48, scale=0.1)),
          ("key_padding_mask", kpm)], ["output"], domain=ms, num_heads=2)
    case(out, "ms_mha_past", "MultiHeadAttention",
         [("query", r(2, 1, 16)), ("key", r(2, 1, 16)), ("value", r(2, 1, 16)), ("bias", None),
          ("key_padding_mask", None), ("attention_bias", None),
          ("past_key", r(2, 2, 3, 8)), ("past_value", r(2, 2, 3, 8))],
         ["output", "present_key", "present_value"], domain=ms, num_heads=2)
    # ONNX Runtime's CPU GroupQueryAttention needs a head size that is a multiple of 16
    case(out, "ms_gqa_prompt", "GroupQueryAttention",
         [("query", r(2, 5, 64)), ("key", r(2, 5, 32)), ("value", r(2, 5, 32)), ("past_key", None), ("past_value", None),
          ("seqlens_k", np.array([4, 4], dtype=np.int32)), ("total_sequence_length", np.array(5, dtype=np.int32))],
         ["output", "present_key", "present_value"], domain=ms, num_heads=4, kv_num_heads=2)
    case(out, "ms_gqa_decode_rotary", "GroupQueryAttention",
         [("query", r(2, 1, 64)), ("key", r(2, 1, 32)), ("value", r(2, 1, 32)),
          ("past_key", r(2, 2, 7, 16)), ("past_value", r(2, 2, 7, 16)),
          ("seqlens_k", np.array([6, 6], dtype=np.int32)), ("total_sequence_length", np.array(7, dtype=np.int32)),
          ("cos_cache", r(16, 8)), ("sin_cache", r(16, 8))],
         ["output", "present_key", "present_value"], domain=ms, num_heads=4, kv_num_heads=2, do_rotary=1)
    case(out, "ms_gqa_window_softcap", "GroupQueryAttention",
         [("query", r(1, 6, 64, scale=2)), ("key", r(1, 6, 32, scale=2)), ("value", r(1, 6, 32)), ("past_key", None), ("past_value", None),
          ("seqlens_k", np.array([5], dtype=np.int32)), ("total_sequence_length", np.array(6, dtype=np.int32))],
         ["output", "present_key", "present_value"], domain=ms, num_heads=4, kv_num_heads=2, local_window_size=3, softcap=5.0)
    case(out, "ms_mha_bias_causal", "MultiHeadAttention",
         [("query", r(1, 4, 16)), ("key", r(1, 4, 16)), ("value", r(1, 4, 16)), ("bias", None),
          ("key_padding_mask", None), ("attention_bias", r(1, 2, 4, 4))],
         ["output"], domain=ms, num_heads=2, unidirectional=1)
    h = 8
    case(out, "ms_skip_layernorm", "SkipLayerNormalization",
         [("input", r(2, 3, h)), ("skip", r(2, 3, h)), ("gamma", r(h)), ("beta", r(h)), ("bias", r(h))],
         ["output", "", "", "sum"], domain=ms, epsilon=1e-5)
    case(out, "ms_skip_simplified_layernorm", "SkipSimplifiedLayerNormalization",
         [("input", r(2, 3, h)), ("skip", r(2, 3, h)), ("gamma", r(h)), ("bias", r(h))],
         ["output", "", "", "sum"], domain=ms, epsilon=1e-6)
    case(out, "simplified_layernorm", "SimplifiedLayerNormalization",
         [("X", r(2, 3, h, scale=4)), ("scale", r(h))], ["Y"], opset=17, epsilon=1e-6)
    ids = np.array([[1, 4, 9, 2], [3, 3, 0, 7]], dtype=np.int32)
    seg = np.array([[0, 0, 1, 1], [0, 1, 1, 1]], dtype=np.int32)
    emask = np.array([[1, 1, 1, 0], [1, 1, 1, 1]], dtype=np.int32)
    case(out, "ms_embed_layernorm", "EmbedLayerNormalization",
         [("input_ids", ids), ("segment_ids", seg), ("word_embedding", r(10, h)), ("position_embedding", r(6, h)),
          ("segment_embedding", r(2, h)), ("gamma", r(h)), ("beta", r(h)), ("mask", emask)],
         ["output", "mask_index", "embedding_sum"], domain=ms, epsilon=1e-5)
    x = r(2, 3, h, scale=2)
    case(out, "ms_gelu", "Gelu", [("X", x)], ["Y"], domain=ms)
    case(out, "ms_bias_gelu", "BiasGelu", [("A", x), ("B", r(h))], ["C"], domain=ms)
    case(out, "ms_fast_gelu_bias", "FastGelu", [("X", x), ("bias", r(h))], ["Y"], domain=ms)
    case(out, "ms_quick_gelu", "QuickGelu", [("X", x)], ["Y"], domain=ms, alpha=1.5)
    # ONNX Runtime has BiasAdd for CUDA only: expected output from NumPy (X + bias + skip)
    b, skip = r(h), r(2, 3, h)
    case(out, "ms_bias_add", "BiasAdd", [("X", x), ("bias", b), ("skip", skip)], ["Y"], domain=ms)
    np.save(out / "ms_bias_add.out0.npy", (x + b + skip).astype(np.float32))


if __name__ == "__main__":
    main(Path(sys.argv[1]))
