// Package packaging holds the tests of the install paths: the Helm chart in charts/almanac,
// the kustomize tree in config/, and the Dockerfile. The chart and config/default are rendered
// in-process (helm.sh/helm/v3 and sigs.k8s.io/kustomize/api), compared with each other and with
// the RBAC that controller-gen writes from the controller's markers, and applied server-side to
// a real kube-apiserver under envtest.
package packaging
