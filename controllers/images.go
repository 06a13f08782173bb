package controllers

import (
	"fmt"
	"strings"
)

// ImageAllowlist is the install-wide list of trainer images a portfolio may name
// (--trainer-image-prefixes, the chart's trainerImagePrefixes). Empty allows every image.
//
// An entry ending in "/" allows every image under that path ("registry.example/almanac/");
// any other entry is one repository and allows it with any tag or digest
// ("registry.example/almanac/almanac-trainer" allows ":1.4" and "@sha256:..." but not
// "registry.example/almanac/almanac-trainer-x"). Images are compared as written: no
// registry or "library/" is filled in, so an allowlist should spell images as portfolios do.
type ImageAllowlist []string

// ParseImageAllowlist splits a comma-separated flag value; empty entries are dropped, and an
// entry with a tag or digest is refused, since it would never match a portfolio's image by the
// rule above in the way its author means.
func ParseImageAllowlist(flagValue string) (ImageAllowlist, error) {
	var out ImageAllowlist
	for _, e := range strings.Split(flagValue, ",") {
		e = strings.TrimSpace(e)
		if e == "" {
			continue
		}
		if strings.Contains(e, "@") || strings.Contains(e[strings.LastIndex(e, "/")+1:], ":") {
			return nil, fmt.Errorf("%q: an entry is a repository or a path ending in /, without tag or digest", e)
		}
		out = append(out, e)
	}
	return out, nil
}

// Allows reports whether image is allowed.
func (l ImageAllowlist) Allows(image string) bool {
	if len(l) == 0 {
		return true
	}
	for _, e := range l {
		if strings.HasSuffix(e, "/") {
			if strings.HasPrefix(image, e) {
				return true
			}
			continue
		}
		if image == e || strings.HasPrefix(image, e+":") || strings.HasPrefix(image, e+"@") {
			return true
		}
	}
	return false
}

// problem is the Stalled message for an image the list refuses, "" when it is allowed.
func (l ImageAllowlist) problem(image string) string {
	if l.Allows(image) {
		return ""
	}
	return fmt.Sprintf("spec.trainer.image: %q is not in the install's allowed trainer images (%s)", image, strings.Join(l, ", "))
}
