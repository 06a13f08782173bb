#!/usr/bin/env bash
# Builds etcd, kube-apiserver, kube-controller-manager and kubectl from the Go module proxy into
# bin/k8s/<version>/ at the repository root. A binary already present is kept. Progress goes to stderr.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../../.." && pwd)
kver=$(awk '$1=="k8s.io/kubernetes" {print $2; exit}' "$here/go.mod")
ever=$(awk '$1=="go.etcd.io/etcd/server/v3" {print $2; exit}' "$here/go.mod")
out="$root/bin/k8s/$kver"
mkdir -p "$out"
major=$(echo "${kver#v}" | cut -d. -f1); minor=$(echo "${kver#v}" | cut -d. -f2)
vflags=""
for p in k8s.io/component-base/version k8s.io/client-go/pkg/version; do
  vflags="$vflags -X $p.gitVersion=$kver -X $p.gitMajor=$major -X $p.gitMinor=$minor -X $p.gitTreeState=clean"
done
cd "$here"
log() { echo "controlplane: $*" >&2; }
if [ ! -x "$out/etcd" ]; then
  log "building etcd $ever (about 2 min cold)"
  go build -trimpath -ldflags "-s -w" -o "$out/etcd" go.etcd.io/etcd/server/v3
fi
missing=()
for b in kube-apiserver kube-controller-manager kubectl; do
  [ -x "$out/$b" ] || missing+=("k8s.io/kubernetes/cmd/$b")
done
if [ ${#missing[@]} -gt 0 ]; then
  log "building ${missing[*]##*/} $kver (about 25 min cold on 2 cores, seconds when cached)"
  go build -trimpath -ldflags "-s -w $vflags" -o "$out/" "${missing[@]}"
fi
log "ready in $out"
ls -l "$out" >&2
