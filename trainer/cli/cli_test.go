package cli

import (
	"bytes"
	"flag"
	"slices"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/exitcode"
)

func TestParse(t *testing.T) {
	for name, tc := range map[string]struct {
		args        []string
		code        int
		ok          bool
		out, errOut string
	}{
		"flags":        {[]string{"--horizon", "8"}, exitcode.OK, true, "", ""},
		"-h":           {[]string{"-h"}, exitcode.OK, false, "usage: almanac-trainer demo", ""},
		"--help":       {[]string{"--help"}, exitcode.OK, false, "-horizon", ""},
		"unknown flag": {[]string{"--horizn", "8"}, exitcode.Config, false, "", "horizn"},
		"bad value":    {[]string{"--horizon", "eight"}, exitcode.Config, false, "", "-horizon"},
		"stray":        {[]string{"--horizon", "8", "weekly"}, exitcode.Config, false, "", `unexpected argument "weekly"`},
		"stray first":  {[]string{"ETS"}, exitcode.Config, false, "", `unexpected argument "ETS"`},
	} {
		t.Run(name, func(t *testing.T) {
			fs := flag.NewFlagSet("demo", flag.ContinueOnError)
			fs.Int("horizon", 14, "forecast horizon")
			var out, errb bytes.Buffer
			code, ok := Parse(fs, "usage: almanac-trainer demo [--horizon N]", tc.args, &out, &errb)
			if code != tc.code || ok != tc.ok || !strings.Contains(out.String(), tc.out) || !strings.Contains(errb.String(), tc.errOut) {
				t.Fatalf("code %d ok %v\nstdout %q\nstderr %q", code, ok, out.String(), errb.String())
			}
			if tc.out == "" && out.Len() > 0 {
				t.Errorf("stdout %q, want nothing", out.String())
			}
		})
	}
}

func TestList(t *testing.T) {
	got, err := List("models", " ETS, Theta ,Naive")
	if err != nil || !slices.Equal(got, []string{"ETS", "Theta", "Naive"}) {
		t.Fatalf("List = %v, %v", got, err)
	}
	if got, err := List("models", ""); err != nil || got != nil {
		t.Fatalf("List(empty) = %v, %v", got, err)
	}
	for _, bad := range []string{"ETS, ", "ETS,,Theta", ",ETS"} {
		if _, err := List("models", bad); err == nil || !strings.Contains(err.Error(), "--models") {
			t.Errorf("List(%q) = %v, want an error naming --models", bad, err)
		}
	}
	if _, err := Ints("quantile-percents", "10,fifty"); err == nil || !strings.Contains(err.Error(), "--quantile-percents") {
		t.Errorf("Ints = %v", err)
	}
}
