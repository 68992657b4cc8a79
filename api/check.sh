#!/usr/bin/env bash
# CI gate for the API: fails when the protos are not buf-formatted, break a
# STANDARD lint rule, or when the generated Go code on disk differs from what
# the protos generate (changed, missing, or stale extra *.pb.go files).
#
# It regenerates into a temporary copy of buf.yaml and api/ and compares that
# copy with the tree on disk, so it gives the same answer before and after
# the files are committed and never touches the working tree.
set -euo pipefail

BUF_VERSION="${BUF_VERSION:-v1.75.0}"

cd "$(dirname "${BASH_SOURCE[0]}")/.."
root="$PWD"

buf() { go run "github.com/bufbuild/buf/cmd/buf@${BUF_VERSION}" "$@"; }

status=0

if ! buf format --diff --exit-code; then
	echo "api/check.sh: protos are not formatted; run api/generate.sh" >&2
	status=1
fi
if ! buf lint; then
	echo "api/check.sh: buf lint failed" >&2
	status=1
fi

tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
cp "$root/buf.yaml" "$tmp/"
cp -R "$root/api" "$tmp/api"
# Drop the generated files from the copy so that a file whose proto was
# removed shows up as an extra file on disk.
find "$tmp/api" -name '*.pb.go' -delete
(cd "$tmp" && buf generate --template api/buf.gen.yaml)

if ! diff -r "$root/api" "$tmp/api"; then
	echo "api/check.sh: generated code is out of date; run api/generate.sh and commit the result" >&2
	status=1
fi

# Once a v1 exists, nothing may break it: compare with the previous commit
# (skipped when history is too shallow or the previous commit had no API).
prev="$(git -C "$root" rev-parse -q --verify 'HEAD~1^{commit}' 2>/dev/null || true)"
if [[ -n "$prev" ]] && git -C "$root" cat-file -e "$prev:buf.yaml" 2>/dev/null; then
	if ! buf breaking --against "$root/.git#ref=$prev"; then
		echo "api/check.sh: the API breaks compatibility with $prev" >&2
		status=1
	fi
else
	echo "api/check.sh: no previous API commit to check breaking changes against"
fi

if [[ "$status" -eq 0 ]]; then
	echo "api/check.sh: protos formatted, lint clean, generated code up to date"
fi
exit "$status"
