package controllers

import (
	"strings"
	"testing"
)

func TestImageAllowlist(t *testing.T) {
	l, err := ParseImageAllowlist(" registry.fenwick.example/almanac/ , registry.fenwick.example/tools/almanac-trainer,")
	if err != nil {
		t.Fatal(err)
	}
	for image, want := range map[string]bool{
		"registry.fenwick.example/almanac/almanac-trainer:1.4":          true,
		"registry.fenwick.example/almanac/nested/trainer@sha256:0f":     true,
		"registry.fenwick.example/tools/almanac-trainer":                true,
		"registry.fenwick.example/tools/almanac-trainer:2":              true,
		"registry.fenwick.example/tools/almanac-trainer@sha256:00":      true,
		"registry.fenwick.example/tools/almanac-trainer-x:2":            false, // a longer name, not a tag
		"registry.fenwick.example/almanac-evil/trainer:1":               false, // "almanac/" is a path, not a name start
		"registry.fenwick.example/tools/other:1":                        false,
		"docker.io/library/busybox:1":                                   false,
		"evil.example/registry.fenwick.example/almanac/almanac-trainer": false,
	} {
		if got := l.Allows(image); got != want {
			t.Errorf("Allows(%q) = %v, want %v", image, got, want)
		}
	}
	if msg := l.problem("busybox:1"); !strings.Contains(msg, `spec.trainer.image: "busybox:1"`) || !strings.Contains(msg, "registry.fenwick.example/almanac/") {
		t.Errorf("problem message %q does not name the field, the image and the list", msg)
	}
	if ImageAllowlist(nil).problem("anything:1") != "" {
		t.Error("an empty list must allow every image")
	}
	for _, bad := range []string{"registry.fenwick.example/almanac/trainer:1", "trainer@sha256:00"} {
		if _, err := ParseImageAllowlist(bad); err == nil || !strings.Contains(err.Error(), bad) {
			t.Errorf("ParseImageAllowlist(%q) = %v, want an error naming the entry", bad, err)
		}
	}
	if l, err := ParseImageAllowlist("localhost:5000/almanac/"); err != nil || !l.Allows("localhost:5000/almanac/t:1") {
		t.Errorf("a registry port is not a tag: %v %v", l, err)
	}
}
