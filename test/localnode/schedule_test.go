package localnode

import (
	"strings"
	"testing"

	corev1 "k8s.io/api/core/v1"
)

func TestPlace(t *testing.T) {
	nodes := []candidate{
		{NodeSpec: NodeSpec{Name: "depot-b", Labels: map[string]string{"zone": "north"}}, running: 1},
		{NodeSpec: NodeSpec{Name: "depot-a", Labels: map[string]string{"zone": "north"}}, running: 1},
		{NodeSpec: NodeSpec{Name: "depot-c", Labels: map[string]string{"zone": "south"},
			Taints: []corev1.Taint{{Key: "gpu", Value: "true", Effect: corev1.TaintEffectNoSchedule}}}},
	}
	tolerateGPU := []corev1.Toleration{{Key: "gpu", Operator: corev1.TolerationOpEqual, Value: "true", Effect: corev1.TaintEffectNoSchedule}}
	tests := map[string]struct {
		selector    map[string]string
		tolerations []corev1.Toleration
		maxPods     int
		want        string
		why         string
	}{
		"fewest pods, then name":       {want: "depot-a", tolerations: nil, selector: map[string]string{"zone": "north"}},
		"taint keeps pods off":         {want: "depot-a"},
		"tolerated taint, fewest pods": {tolerations: tolerateGPU, want: "depot-c"},
		"selector and taint":           {selector: map[string]string{"zone": "south"}, why: "1 node(s) had untolerated taint, 2 node(s) didn't match Pod's node selector"},
		"no node matches":              {selector: map[string]string{"zone": "east"}, why: "3 node(s) didn't match Pod's node selector"},
		"max pods":                     {maxPods: 1, why: "1 node(s) had untolerated taint, 2 Too many pods"},
		"max pods with toleration":     {maxPods: 1, tolerations: tolerateGPU, want: "depot-c"},
	}
	for name, tc := range tests {
		pod := &corev1.Pod{Spec: corev1.PodSpec{NodeSelector: tc.selector, Tolerations: tc.tolerations}}
		got, why := place(pod, nodes, tc.maxPods)
		if got != tc.want {
			t.Errorf("%s: node %q, want %q (%s)", name, got, tc.want, why)
		}
		if tc.want == "" && !strings.Contains(why, tc.why) {
			t.Errorf("%s: message %q, want it to contain %q", name, why, tc.why)
		}
	}
}
