package controllers

import (
	"testing"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
)

func TestSlimPodKeepsWhatFoldingReads(t *testing.T) {
	pod := finishedPod(3, corev1.PodSucceeded, `{"kind":"train","shard":3}`, time.Date(2026, 12, 1, 3, 0, 0, 0, time.UTC))
	pod.Labels = map[string]string{LabelRun: "fenwick-weekly-29933550", LabelStep: "train"}
	pod.ManagedFields = []metav1.ManagedFieldsEntry{{Manager: "kubelet"}}
	pod.Spec = buildJob(fenwickPortfolio(), fenwickRun("fenwick-weekly-29933550"), stepTrain, jobParams{Shards: 4}).Spec.Template.Spec
	out, err := slimPod(&pod)
	if err != nil {
		t.Fatal(err)
	}
	slim := out.(*corev1.Pod)
	if len(slim.Spec.Containers) != 0 || slim.ManagedFields != nil {
		t.Errorf("spec or managed fields kept: %d containers, %d managed fields", len(slim.Spec.Containers), len(slim.ManagedFields))
	}
	if msg, ok := terminationMessage(slim); !ok || msg != `{"kind":"train","shard":3}` {
		t.Errorf("termination message = %q, %v", msg, ok)
	}
	if podIndex(slim) != 3 || slim.Status.Phase != corev1.PodSucceeded || podShardKeys(slim)[0] != "fenwick-weekly-29933550/train/3" {
		t.Errorf("slim pod lost its index, phase or labels: %+v", slim.ObjectMeta)
	}
	if pod.ManagedFields == nil {
		t.Error("slimPod changed its input")
	}
}
