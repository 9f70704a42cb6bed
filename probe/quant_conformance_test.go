package probe_test

import (
	"path/filepath"
	"testing"
)

// The ONNX node tests of the quantization operators (source: the ONNX
// project's published test data) must run and pass, not be skipped as
// unsupported. The float8, int4, int2 and float4 variants stay skipped: the
// loader rejects those element types with an error naming the type.
func TestQuantizationNodeTestsPass(t *testing.T) {
	root := conformanceDir(t)
	if root == "" {
		t.Skip("ONNX conformance data not found")
	}
	for _, name := range []string{
		"test_quantizelinear", "test_quantizelinear_axis", "test_quantizelinear_blocked_asymmetric",
		"test_quantizelinear_blocked_symmetric", "test_quantizelinear_int16", "test_quantizelinear_uint16",
		"test_dequantizelinear", "test_dequantizelinear_axis", "test_dequantizelinear_blocked",
		"test_dequantizelinear_int16", "test_dequantizelinear_uint16",
		"test_dynamicquantizelinear", "test_dynamicquantizelinear_max_adjusted", "test_dynamicquantizelinear_min_adjusted",
		"test_dynamicquantizelinear_expanded", "test_dynamicquantizelinear_max_adjusted_expanded",
		"test_dynamicquantizelinear_min_adjusted_expanded",
		"test_qlinearconv", "test_qlinearmatmul_2D_int8_float16", "test_qlinearmatmul_2D_int8_float32",
		"test_qlinearmatmul_2D_uint8_float16", "test_qlinearmatmul_2D_uint8_float32",
		"test_qlinearmatmul_3D_int8_float16", "test_qlinearmatmul_3D_int8_float32",
		"test_qlinearmatmul_3D_uint8_float16", "test_qlinearmatmul_3D_uint8_float32",
		"test_convinteger_with_padding", "test_convinteger_without_padding", "test_matmulinteger",
	} {
		if err := runCase("node", filepath.Join(root, "node", name)); err != nil {
			t.Errorf("%s: %v", name, err)
		}
	}
}
