package localnode

import "testing"

func TestTailLog(t *testing.T) {
	log := []byte("a\nbb\nccc\n")
	for _, c := range []struct {
		tail, limit int
		want        string
	}{
		{-1, -1, "a\nbb\nccc\n"},
		{2, -1, "bb\nccc\n"},
		{5, -1, "a\nbb\nccc\n"},
		{0, -1, ""},
		{2, 4, "bb\nc"},
		{-1, 0, ""},
	} {
		if got := string(tailLog(log, c.tail, c.limit)); got != c.want {
			t.Errorf("tail %d limit %d: %q, want %q", c.tail, c.limit, got, c.want)
		}
	}
	if got := string(tailLog([]byte("x\ny"), 1, -1)); got != "y" {
		t.Errorf("last line without newline: %q", got)
	}
	if got := string(tailLog(nil, 3, -1)); got != "" {
		t.Errorf("empty log: %q", got)
	}
}
