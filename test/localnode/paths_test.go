package localnode

import "testing"

func TestPathMapRewrite(t *testing.T) {
	m := newPathMap(map[string]string{
		"/etc/almanac/run":     "/pods/p/volumes/run",
		"/tmp/":                "/pods/p/volumes/scratch",
		"/tmp/cache":           "/pods/p/volumes/cache",
		"/dev/termination-log": "/pods/p/termination-log",
		"/":                    "/never",
	})
	tests := map[string]struct{ in, want string }{
		"exact":                   {"/tmp", "/pods/p/volumes/scratch"},
		"prefix":                  {"/etc/almanac/run/config.json", "/pods/p/volumes/run/config.json"},
		"flag value":              {"--out=/tmp/x", "--out=/pods/p/volumes/scratch/x"},
		"nested mount wins":       {"/tmp/cache/a", "/pods/p/volumes/cache/a"},
		"not a component":         {"/tmpfoo", "/tmpfoo"},
		"inside another path":     {"/data/tmp/x", "/data/tmp/x"},
		"relative":                {"tmp/x", "tmp/x"},
		"list of paths":           {"/tmp/a:/etc/almanac/run", "/pods/p/volumes/scratch/a:/pods/p/volumes/run"},
		"termination log":         {"/dev/termination-log", "/pods/p/termination-log"},
		"root is never rewritten": {"/usr/bin", "/usr/bin"},
		"no slash":                {"train", "train"},
		"url path left alone":     {"s3://bucket/tmp/x", "s3://bucket/tmp/x"},
	}
	for name, tc := range tests {
		if got := m.rewrite(tc.in); got != tc.want {
			t.Errorf("%s: rewrite(%q) = %q, want %q", name, tc.in, got, tc.want)
		}
	}
}
