package localnode

import (
	"fmt"
	"sort"
	"strings"

	"github.com/go-logr/logr"
	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/labels"
)

// defaultScheduler is the scheduler name the agent places pods for (empty means the same).
const defaultScheduler = corev1.DefaultSchedulerName

// candidate is one node as the placement sees it.
type candidate struct {
	NodeSpec
	// running counts the pods bound to the node that have not finished.
	running int
}

// place picks the node for pod: the nodes whose labels match spec.nodeSelector, whose taints
// (NoSchedule and NoExecute) the pod tolerates and that run fewer than maxPods pods (0: no
// limit); of those, the one running the fewest pods, then the first by name. Without a fit
// it returns "" and a message in the style of the scheduler's Unschedulable message.
// Node affinity, resources and ports are not considered.
func place(pod *corev1.Pod, nodes []candidate, maxPods int) (string, string) {
	sel := labels.SelectorFromSet(pod.Spec.NodeSelector)
	best := -1
	why := map[string]int{}
	for i, n := range nodes {
		switch {
		case !sel.Matches(labels.Set(n.Labels)):
			why["node(s) didn't match Pod's node selector"]++
		case !tolerates(pod.Spec.Tolerations, n.Taints):
			why["node(s) had untolerated taint"]++
		case maxPods > 0 && n.running >= maxPods:
			why["Too many pods"]++
		case best < 0 || n.running < nodes[best].running || (n.running == nodes[best].running && n.Name < nodes[best].Name):
			best = i
		}
	}
	if best >= 0 {
		return nodes[best].Name, ""
	}
	reasons := make([]string, 0, len(why))
	for r, k := range why {
		reasons = append(reasons, fmt.Sprintf("%d %s", k, r))
	}
	sort.Strings(reasons)
	return "", fmt.Sprintf("0/%d nodes are available: %s.", len(nodes), strings.Join(reasons, ", "))
}

// tolerates reports whether every NoSchedule and NoExecute taint is tolerated.
func tolerates(tols []corev1.Toleration, taints []corev1.Taint) bool {
	for i := range taints {
		t := &taints[i]
		if t.Effect == corev1.TaintEffectPreferNoSchedule {
			continue
		}
		ok := false
		for j := range tols {
			if tols[j].ToleratesTaint(logr.Discard(), t, false) {
				ok = true
				break
			}
		}
		if !ok {
			return false
		}
	}
	return true
}
