#!/usr/bin/env bash
# build.sh BIN builds the controller and trainer images without a container daemon or a base
# image: Debian's buildah (chroot isolation, vfs storage in a temporary directory) builds the
# Dockerfile's targets with FILES=context from BIN/image-context, which holds the binaries that
# `make build` left in BIN and the file tree images/root.sh writes on this machine. Each image is
# written as an OCI archive, BIN/almanac-<target>.oci.tar, with the reference name $VERSION.
# VERSION, COMMIT and SOURCE fill the image labels (the Makefile sets them).
set -euo pipefail
bin=${1:?usage: build.sh BIN}
: "${VERSION:?}" "${COMMIT:?}" "${SOURCE:?}"
for b in almanac-controller almanac-trainer; do
	[ -x "$bin/$b" ] || { echo "build.sh: $bin/$b missing: run make build" >&2; exit 2; }
done
ctx=$bin/image-context
rm -rf "$ctx"
mkdir -p "$ctx/files"
cp "$bin/almanac-controller" "$bin/almanac-trainer" "$ctx/files/"
sh images/root.sh "$ctx/files/root"

store=$(mktemp -d)
trap 'rm -rf "$store"' EXIT
buildah=(buildah --storage-driver vfs --root "$store/storage" --runroot "$store/run")
# Layer and file times from the commit, so the same commit gives the same image.
epoch=$(git log -1 --format=%ct 2>/dev/null || echo 0)
for target in controller trainer; do
	"${buildah[@]}" bud --quiet --isolation chroot --timestamp "$epoch" \
		--build-arg FILES=context --build-arg VERSION="$VERSION" --build-arg COMMIT="$COMMIT" \
		--build-arg SOURCE="$SOURCE" --target "$target" -f Dockerfile \
		-t "localhost/almanac-$target:$VERSION" "$ctx" >/dev/null
	out=$bin/almanac-$target.oci.tar
	rm -f "$out"
	"${buildah[@]}" push --quiet "localhost/almanac-$target:$VERSION" "oci-archive:$out:$VERSION"
	echo "images: $out ($(du -k "$out" | cut -f1) KiB; binary $(du -k "$bin/almanac-$target" | cut -f1) KiB)"
done
