package tables

import (
	"bytes"
	"encoding/csv"
	"reflect"
	"testing"
)

// Issue 18 case 6: a key or reason starting with = + - @ (or a tab or CR) is written to CSV
// with a leading quote, so a spreadsheet shows it as text (OWASP, "CSV Injection"); a cell
// already starting with the quote gets one more; the readers drop one and read every row back.
func TestCSVFormulaCellsNeutralised(t *testing.T) {
	rows := []RejectedRow{
		{Key: `=HYPERLINK("http://example.invalid")`, Reason: "+1 too short"},
		{Key: "-FLP-OATS", Reason: "@once"},
		{Key: "\tTEA", Reason: "'quoted"},
		{Key: "FLP-JAM-340", Reason: "2 rows"},
	}
	var b bytes.Buffer
	if err := WriteRejected(&b, CSV, []string{"item"}, rows); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(bytes.NewReader(b.Bytes())).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	want := [][]string{
		{`'=HYPERLINK("http://example.invalid")`, "'+1 too short"},
		{"'-FLP-OATS", "'@once"},
		{"'\tTEA", "''quoted"},
		{"FLP-JAM-340", "2 rows"},
	}
	if !reflect.DeepEqual(recs[1:], want) {
		t.Fatalf("cells as written %q, want %q", recs[1:], want)
	}
	got, err := ReadRejected(bytes.NewReader(b.Bytes()), CSV, []string{"item"})
	if err != nil || !reflect.DeepEqual(got, rows) {
		t.Fatalf("read back %q, %v; want %q", got, err, rows)
	}
}
