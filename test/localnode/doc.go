// Package localnode is a test-only node agent: it plays the kubelet (and the scheduler) for one
// or more Node objects it registers, and runs each pod's container as a host process.
//
// It sees only Pods. An image is replaced by a locally built binary (the image map); volumes
// (ConfigMap, Secret, emptyDir, and projected ConfigMap/Secret sources) become directories under
// a per-pod directory, and every mount path and the termination message path are rewritten as
// prefixes in the container's args and env values, so a program that reads
// /etc/app/config.json reads <pod dir>/volumes/<volume>/config.json instead. The agent reports
// pod phases, container states, exit codes and the termination message, and on pod deletion
// stops the process (SIGTERM, grace period, SIGKILL) before it removes the pod with grace 0.
// It serves the container logs the API server asks for (kubectl logs, pods/log; logs.go).
//
// Host processes are not isolated: they share the host's network, users and file system. A pod
// whose image is one of Options.Sandboxed runs the image's own program in the image's root
// instead (sandboxed.go, test/sandbox): the pod's user, groups and read-only root, its volumes
// and termination message file bound at their paths (no rewriting), the shared directories at
// theirs; the network is still the host's. It is for tests on loopback only.
package localnode
