package localnode

import (
	"sort"
	"strings"
)

// pathMap maps container paths (mount paths, the termination message path) to host paths.
type pathMap struct {
	// from and to are parallel; from is sorted longest first so that a nested mount wins.
	from, to []string
}

// newPathMap returns a pathMap for the given container-to-host pairs. Trailing slashes of
// container paths are ignored; the root "/" is never mapped.
func newPathMap(pairs map[string]string) pathMap {
	var m pathMap
	keys := make([]string, 0, len(pairs))
	for k := range pairs {
		if c := strings.TrimRight(k, "/"); c != "" {
			keys = append(keys, k)
		}
	}
	sort.Slice(keys, func(i, j int) bool {
		a, b := strings.TrimRight(keys[i], "/"), strings.TrimRight(keys[j], "/")
		if len(a) != len(b) {
			return len(a) > len(b)
		}
		return a < b
	})
	for _, k := range keys {
		m.from = append(m.from, strings.TrimRight(k, "/"))
		m.to = append(m.to, strings.TrimRight(pairs[k], "/"))
	}
	return m
}

// rewrite replaces each occurrence of a container path in s that starts a path (at the start
// of s or after a character that cannot be part of a path, such as '=' or ':') and ends a path
// component (at the end of s, before '/', or before such a character) by its host path.
// "/tmp" in "--out=/tmp/x" becomes "<host>/x"; "/tmpfoo" and "/data/tmp" are left alone.
func (m pathMap) rewrite(s string) string {
	if len(m.from) == 0 || !strings.Contains(s, "/") {
		return s
	}
	var b strings.Builder
	for i := 0; i < len(s); {
		if s[i] == '/' && (i == 0 || !pathChar(s[i-1])) {
			if j, n := m.match(s[i:]); j >= 0 {
				b.WriteString(m.to[j])
				i += n
				continue
			}
		}
		b.WriteByte(s[i])
		i++
	}
	return b.String()
}

// match returns the index of the longest container path that s starts with as whole path
// components, and its length; -1 if none.
func (m pathMap) match(s string) (int, int) {
	for j, f := range m.from {
		if strings.HasPrefix(s, f) && (len(s) == len(f) || s[len(f)] == '/' || !pathChar(s[len(f)])) {
			return j, len(f)
		}
	}
	return -1, 0
}

// pathChar reports whether c may appear inside a path name (letters, digits, and ._-~+@/).
func pathChar(c byte) bool {
	switch {
	case c >= 'a' && c <= 'z', c >= 'A' && c <= 'Z', c >= '0' && c <= '9':
		return true
	}
	return strings.IndexByte("._-~+@/", c) >= 0
}
