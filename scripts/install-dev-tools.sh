#!/usr/bin/env bash
# Tools to regenerate the ONNX bindings (go generate ./loader/onnxpb): protoc,
# protoc-gen-go, and the onnx.proto shipped by Debian's python3-onnx.
set -euo pipefail
apt-get update -qq
DEBIAN_FRONTEND=noninteractive apt-get install -y -qq protobuf-compiler python3-onnx
GOBIN="$(go env GOPATH)/bin" go install google.golang.org/protobuf/cmd/protoc-gen-go@v1.36.12
echo "now: PATH=\$PATH:$(go env GOPATH)/bin go generate ./loader/onnxpb"
