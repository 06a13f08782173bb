package main

import (
	"bytes"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/exitcode"
)

func TestRunExitCodes(t *testing.T) {
	var out, errb bytes.Buffer
	if got := run(nil, &out, &errb); got != exitcode.Config {
		t.Errorf("no command: exit %d, want %d", got, exitcode.Config)
	}
	if got := run([]string{"frobnicate"}, &out, &errb); got != exitcode.Config || !strings.Contains(errb.String(), `unknown command "frobnicate"`) {
		t.Errorf("unknown command: exit %d, stderr %q", got, errb.String())
	}
	out.Reset()
	if got := run([]string{"version"}, &out, &errb); got != exitcode.OK || !strings.HasPrefix(out.String(), "almanac-trainer dev") {
		t.Errorf("version: exit %d, stdout %q", got, out.String())
	}
}
