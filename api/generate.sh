#!/usr/bin/env bash
# Formats and lints the protos under api/, then regenerates the Go code beside
# them. Run from anywhere; it works from the repository root.
#
# Tools are pinned and fetched through the Go module proxy with `go run`
# (the plugin versions are pinned in api/buf.gen.yaml). The first run builds
# buf, which takes several minutes; later runs use Go's build cache.
set -euo pipefail

BUF_VERSION="${BUF_VERSION:-v1.75.0}"

cd "$(dirname "${BASH_SOURCE[0]}")/.."

buf() { go run "github.com/bufbuild/buf/cmd/buf@${BUF_VERSION}" "$@"; }

buf format --write
buf lint
buf generate --template api/buf.gen.yaml
