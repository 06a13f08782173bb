package controllers

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"

	. "github.com/onsi/ginkgo/v2"
	. "github.com/onsi/gomega"
	"k8s.io/client-go/tools/clientcmd"
	clientcmdapi "k8s.io/client-go/tools/clientcmd/api"
)

// kubectlPath is the self-built kubectl next to the envtest binaries.
func kubectlPath() string {
	return filepath.Join(os.Getenv("KUBEBUILDER_ASSETS"), "kubectl")
}

// writeKubeconfig writes the envtest rest config as a kubeconfig file for kubectl.
func writeKubeconfig() string {
	kc := clientcmdapi.NewConfig()
	kc.Clusters["envtest"] = &clientcmdapi.Cluster{Server: cfg.Host, CertificateAuthorityData: cfg.CAData}
	kc.AuthInfos["envtest"] = &clientcmdapi.AuthInfo{ClientCertificateData: cfg.CertData, ClientKeyData: cfg.KeyData, Token: cfg.BearerToken}
	kc.Contexts["envtest"] = &clientcmdapi.Context{Cluster: "envtest", AuthInfo: "envtest"}
	kc.CurrentContext = "envtest"
	path := filepath.Join(GinkgoT().TempDir(), "kubeconfig")
	Expect(clientcmd.WriteToFile(*kc, path)).To(Succeed())
	return path
}

// checkKubectlGet runs `kubectl get fp` and `kubectl get frun` (wide, so every printer column
// shows) in ns after a full life cycle and checks that no column is left empty. With
// ALMANAC_UPDATE_GOLDEN=1 the output is written to testdata/kubectl-get.txt for the README.
func checkKubectlGet(ns string) {
	if _, err := os.Stat(kubectlPath()); err != nil {
		Skip("kubectl is not next to the envtest binaries: " + err.Error())
	}
	kubeconfig := writeKubeconfig()
	var golden bytes.Buffer
	for _, kind := range []string{"fp", "frun"} {
		cmd := exec.Command(kubectlPath(), "--kubeconfig", kubeconfig, "get", kind, "-n", ns, "-o", "wide")
		out, err := cmd.CombinedOutput()
		Expect(err).NotTo(HaveOccurred(), string(out))
		text := string(out)
		golden.WriteString("$ kubectl get " + kind + " -o wide\n" + text + "\n")
		lines := strings.Split(strings.TrimSpace(text), "\n")
		Expect(lines).To(HaveLen(2), text)
		Expect(lines[1]).NotTo(ContainSubstring("<none>"), text)
		Expect(lines[1]).NotTo(ContainSubstring("<unknown>"), text)
		switch kind {
		case "fp":
			Expect(strings.Fields(lines[0])).To(HaveExactElements("NAME", "READY", "SCHEDULE", "SUSPEND", "LAST", "SCHEDULE",
				"LAST", "RUN", "EXPECTED", "REALIZED", "GEO", "RATIO", "DRIFT", "NEXT", "AGE"))
			Expect(lines[1]).To(MatchRegexp(`^fenwick-daily\s+True\s+\* \* \* \* \*\s+false\s+\S+\s+fenwick-daily-\d+\s+0\.5000\s+0\.6000\s+1\.200\s+False\s+\d{4}-\d\d-\d\dT\S+Z\s+\S+$`))
		case "frun":
			Expect(strings.Fields(lines[0])).To(HaveExactElements("NAME", "PORTFOLIO", "TRIGGER", "PHASE", "SHARDS", "DONE",
				"FAILED", "SERIES", "PROGRESS", "SERIES/S", "EST-END", "PARALLEL", "EXPECTED", "REALIZED", "GEO", "RATIO", "COVERAGE", "PROMISED", "AGE"))
			Expect(lines[1]).To(MatchRegexp(`^fenwick-daily-\d+\s+fenwick-daily\s+Schedule\s+Succeeded\s+4\s+4\s+0\s+402\s+100\s+[0-9.]+\s+\d{4}-\d\d-\d\dT\S+Z\s+0\s+0\.5000\s+0\.6000\s+1\.200\s+0\.800\s+0\.800\s+\S+$`))
		}
	}
	if os.Getenv("ALMANAC_UPDATE_GOLDEN") == "1" {
		Expect(os.WriteFile(filepath.Join("testdata", "kubectl-get.txt"), golden.Bytes(), 0o644)).To(Succeed())
	}
}
