#!/usr/bin/env bash
# get-onnxruntime.sh places the ONNX Runtime 1.24.1 CPU shared library at
# third_party/onnxruntime/linux-<arch>/libonnxruntime.so.1, where midsag looks
# for it (models.FindLibrary). The library is taken from the onnxruntime-node
# package on the npm registry, which ships the plain C library beside its
# Node binding, and is checked against a pinned sha256 before it is used.
#
# Idempotent: when the file is already in place with the right checksum the
# script does nothing and needs no network.
set -euo pipefail

ORT_VERSION=1.24.1
# sha256 of package/bin/napi-v6/linux/<arch>/libonnxruntime.so.1 in
# onnxruntime-node@1.24.1 (recorded from the npm tarball when it was pinned).
SHA256_X64=53ef1ac028dd1b05554b8da28d9159eb3876f99868193d2aaa6e67f0243c23d4
SHA256_ARM64=7954e8bdedb497f830c6a679e818d98399b7f4d81ade1126c3e0be74d28111ab

say() { printf 'get-onnxruntime: %s\n' "$*" >&2; }
die() { say "error: $*"; exit 1; }

[ "$(uname -s)" = Linux ] || die "only Linux is supported (this is $(uname -s))"
case "$(uname -m)" in
x86_64 | amd64) arch=x64 want=$SHA256_X64 ;;
aarch64 | arm64) arch=arm64 want=$SHA256_ARM64 ;;
*) die "no pinned ONNX Runtime build for machine type $(uname -m)" ;;
esac

root=$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)
dest_dir="$root/third_party/onnxruntime/linux-$arch"
dest="$dest_dir/libonnxruntime.so.1"

sha() { sha256sum "$1" | cut -d' ' -f1; }

if [ -f "$dest" ]; then
	if [ "$(sha "$dest")" = "$want" ]; then
		say "ONNX Runtime $ORT_VERSION already in place: $dest"
		exit 0
	fi
	say "existing $dest has the wrong sha256; fetching it again"
fi

command -v npm >/dev/null || die "npm is needed to fetch onnxruntime-node@$ORT_VERSION from the npm registry"
command -v tar >/dev/null || die "tar is needed"

tmp=$(mktemp -d)
part="$dest.part.$$"
trap 'rm -rf "$tmp"; rm -f "$part"' EXIT

say "fetching onnxruntime-node@$ORT_VERSION with npm pack"
(cd "$tmp" && npm pack --silent "onnxruntime-node@$ORT_VERSION" >/dev/null) ||
	die "npm pack onnxruntime-node@$ORT_VERSION failed (is the npm registry reachable?)"
tarball=$(ls "$tmp"/onnxruntime-node-*.tgz 2>/dev/null | head -n1)
[ -n "$tarball" ] || die "npm pack produced no tarball"

member="package/bin/napi-v6/linux/$arch/libonnxruntime.so.1"
tar -xzf "$tarball" -C "$tmp" "$member" || die "$member is not in $(basename "$tarball")"

got=$(sha "$tmp/$member")
if [ "$got" != "$want" ]; then
	die "sha256 mismatch for $member: got $got, want $want; refusing to install it"
fi

mkdir -p "$dest_dir"
# Copy to a temporary name in the destination folder, then rename, so a
# reader never sees a half-written library.
cp "$tmp/$member" "$part"
chmod 0644 "$part"
mv -f "$part" "$dest"
say "installed ONNX Runtime $ORT_VERSION ($arch, sha256 $want) at $dest"
