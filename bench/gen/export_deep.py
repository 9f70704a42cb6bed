"""Export a deep model for the report-writing benchmark (bench/report.sh).

Usage: /usr/bin/python3 bench/gen/export_deep.py OUTDIR
Writes swin_t.onnx (torchvision Swin-T, random He-initialised weights, 224×224,
symbolic batch) and swin_t.npy (8 seeded Gaussian items): a model with about a
thousand observed layers, so its report has many histogram pages.
"""
import sys

import torchvision

import export as base

base.SAMPLES["swin_t"] = 8


def main():
    out = sys.argv[1]
    base.os.makedirs(out, exist_ok=True)
    base.torch.manual_seed(0)
    base.export(torchvision.models.swin_t(weights=None), (8, 3, 224, 224), "swin_t", out)


if __name__ == "__main__":
    main()
