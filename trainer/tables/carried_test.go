package tables

import (
	"bytes"
	"strings"
	"testing"
)

// Carried-forward rows (issue 18 case 1) keep their mark through both formats; a table with
// none has no carried columns, and a carried row must name the run it came from.
func TestCarriedColumns(t *testing.T) {
	h, rows := sampleForecasts()
	rows[2].CarriedRuns, rows[2].CarriedFrom = 2, "flp-weekly-20261123"
	for _, f := range formats {
		var buf bytes.Buffer
		if err := WriteForecasts(&buf, f, h, rows); err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		_, got, err := ReadForecasts(bytes.NewReader(buf.Bytes()), f, keys)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		for i := range rows {
			if got[i].CarriedRuns != rows[i].CarriedRuns || got[i].CarriedFrom != rows[i].CarriedFrom {
				t.Errorf("%s row %d: carried %d from %q, want %d from %q", f, i, got[i].CarriedRuns, got[i].CarriedFrom, rows[i].CarriedRuns, rows[i].CarriedFrom)
			}
		}
	}
	_, fresh := sampleForecasts()
	var buf bytes.Buffer
	if err := WriteForecasts(&buf, CSV, h, fresh); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(buf.String(), colCarried) {
		t.Errorf("a table without carried rows has the %s column:\n%s", colCarried, buf.String())
	}
	rows[2].CarriedFrom = ""
	if err := WriteForecasts(&buf, CSV, h, rows); err == nil || !strings.Contains(err.Error(), "carried 2 runs") {
		t.Errorf("a carried row without its run: %v", err)
	}
}
