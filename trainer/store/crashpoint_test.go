package store

import (
	"context"
	"errors"
	"io"
	"slices"
	"testing"
)

// The crash-point hooks see exactly the mutations, in order, before and after each commit: a
// Write whose fn fails reaches neither.
func TestCommittedMutationsAreReported(t *testing.T) {
	var seen []string
	afterCommit = func(op, key string) { seen = append(seen, op+" "+key) }
	beforeCommit = func(op, key string) { seen = append(seen, "before "+op+" "+key) }
	t.Cleanup(func() { afterCommit, beforeCommit = nil, nil })
	ctx := context.Background()
	for _, uri := range []string{"mem://crashpoint-hook/", "file://" + t.TempDir()} {
		seen = nil
		s, err := Open(ctx, uri)
		if err != nil {
			t.Fatal(err)
		}
		if err := s.Put(ctx, "runs/r1/a.json", []byte("{}")); err != nil {
			t.Fatal(err)
		}
		boom := errors.New("writer failed")
		if err := s.Write(ctx, "runs/r1/b.json", func(io.Writer) error { return boom }); !errors.Is(err, boom) {
			t.Fatal(err)
		}
		if err := s.Copy(ctx, "runs/r1/c.json", "runs/r1/a.json"); err != nil {
			t.Fatal(err)
		}
		if err := s.Delete(ctx, "runs/r1/a.json"); err != nil {
			t.Fatal(err)
		}
		if _, err := s.Get(ctx, "runs/r1/c.json"); err != nil {
			t.Fatal(err)
		}
		want := []string{"before write runs/r1/a.json", "write runs/r1/a.json", "before copy runs/r1/c.json", "copy runs/r1/c.json",
			"before delete runs/r1/a.json", "delete runs/r1/a.json"}
		if !slices.Equal(seen, want) {
			t.Errorf("%s: reported %q, want %q", uri, seen, want)
		}
		s.Close()
	}
}
