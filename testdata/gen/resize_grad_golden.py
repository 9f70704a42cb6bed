"""Golden gradients of resampling (ONNX Resize) from PyTorch autograd.

For each case below, x (float64, fixed seed) is resampled with
torch.nn.functional.interpolate, L = sum(w * y) for a fixed float64 w, and
torch.autograd gives dL/dx. Written to testdata/ref/resize.grad.npz:

  <case>/x   float64  the input
  <case>/w   float64  dL/dy (the weights of L)
  <case>/y   float64  torch's output (the Go test checks its forward against it first)
  <case>/gx  float64  dL/dx

grad/torch_test.go (TestResizeAgainstTorch) builds the ONNX Resize node that
matches each case (mode and coordinate_transformation_mode, sizes) and
compares. Run: /usr/bin/python3 testdata/gen/resize_grad_golden.py
"""

from pathlib import Path

import numpy as np
import torch
import torch.nn.functional as F

REF = Path(__file__).resolve().parents[2] / "testdata" / "ref"
torch.set_num_threads(1)
torch.use_deterministic_algorithms(True)

# name: (input shape, output spatial size, interpolate keyword arguments)
CASES = {
    "bilinear_up": ((2, 3, 4, 5), (7, 9), dict(mode="bilinear", align_corners=False)),
    "bilinear_down": ((1, 2, 9, 7), (4, 3), dict(mode="bilinear", align_corners=False)),
    "bilinear_align_corners": ((1, 2, 4, 6), (7, 5), dict(mode="bilinear", align_corners=True)),
    "bicubic_up": ((1, 2, 4, 5), (9, 8), dict(mode="bicubic", align_corners=False)),
    "bicubic_align_corners": ((1, 1, 5, 4), (3, 7), dict(mode="bicubic", align_corners=True)),
    "nearest_up": ((1, 2, 3, 4), (7, 6), dict(mode="nearest")),
    "nearest_exact_down": ((1, 2, 9, 8), (4, 5), dict(mode="nearest-exact")),
    "linear_1d": ((2, 3, 7), (11,), dict(mode="linear", align_corners=False)),
    "trilinear": ((1, 2, 3, 4, 5), (5, 3, 7), dict(mode="trilinear", align_corners=False)),
    "bilinear_antialias_down": ((1, 2, 11, 9), (4, 5), dict(mode="bilinear", align_corners=False, antialias=True)),
}


def main():
    g = torch.Generator().manual_seed(20261205)
    out = {}
    for name, (shape, size, kw) in CASES.items():
        x = torch.randn(shape, generator=g, dtype=torch.float64, requires_grad=True)
        y = F.interpolate(x, size=size, **kw)
        w = torch.randn(y.shape, generator=g, dtype=torch.float64)
        (y * w).sum().backward()
        out[name + "/x"] = x.detach().numpy()
        out[name + "/w"] = w.numpy()
        out[name + "/y"] = y.detach().numpy()
        out[name + "/gx"] = x.grad.numpy()
    np.savez(REF / "resize.grad.npz", **out)
    print("wrote", REF / "resize.grad.npz", len(CASES), "cases")


if __name__ == "__main__":
    main()
