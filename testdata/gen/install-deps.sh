#!/bin/sh
# Installs what the generator scripts in testdata/gen need (Debian packages).
# Only for regenerating testdata; the Go build and CI do not need any of this.
set -e
if [ "$(id -u)" -ne 0 ]; then SUDO=sudo; else SUDO=; fi
$SUDO apt-get update
$SUDO apt-get install -y python3-torch python3-torchvision python3-sklearn python3-onnx python3-numpy
