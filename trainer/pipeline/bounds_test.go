package pipeline

import (
	"bytes"
	"context"
	"fmt"
	"strings"
	"testing"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/tables"
)

// Issue 18 case 6: a key cell of 100 KB used to be copied into rejected.csv (and, for a usable
// history, into every forecast row). Now the series is rejected naming the column, the length
// and the start, and no output holds a key cell longer than ingest.MaxKeyCellBytes plus "...".
func TestLongKeysAreCappedInOutputs(t *testing.T) {
	dir := t.TempDir()
	in := mustOpen(t, "file://"+dir)
	putInput(t, in)
	long := "FLP-" + strings.Repeat("OATS", 25_000) // 100,004 bytes
	if err := in.Put(context.Background(), "in/depot-dunmore.csv", depotCSV("dunmore", []string{long, "FLP-RYE-500"}, 42, "")); err != nil {
		t.Fatal(err)
	}
	cfg := testConfig("flp-0001", "file://"+dir+"/in/", "file://"+dir+"/out")
	cfg.Publish = &runconfig.Publish{MinForecastPercent: 50, MaxCarriedForwardPercent: 50} // 7 of 9 forecast
	runAll(t, cfg)
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0001")
	var rejected []tables.RejectedRow
	for _, u := range m.Units {
		for _, f := range u.Files {
			b, err := out.Get(context.Background(), f.Key)
			if err != nil {
				t.Fatal(err)
			}
			var keys []string
			switch f.Table {
			case TableForecasts:
				_, rows, err := tables.ReadForecasts(bytes.NewReader(b), "csv", testKeys)
				if err != nil {
					t.Fatal(err)
				}
				for _, r := range rows {
					keys = append(keys, r.Key)
				}
			case TableRejected:
				rows, err := tables.ReadRejected(bytes.NewReader(b), "csv", testKeys)
				if err != nil {
					t.Fatal(err)
				}
				rejected = append(rejected, rows...)
				for _, r := range rows {
					keys = append(keys, r.Key)
				}
			}
			for _, k := range keys {
				cells, err := ingest.SplitKey(k, 2)
				if err != nil {
					t.Fatal(err)
				}
				if len(cells[0]) > ingest.MaxKeyCellBytes+3 {
					t.Fatalf("%s holds a key cell of %d bytes", f.Key, len(cells[0]))
				}
			}
		}
	}
	want := fmt.Sprintf(`column "item": series key is %d bytes, more than %d (it starts "FLP-OATSOATS`, len(long), ingest.MaxKeyCellBytes)
	for _, r := range rejected {
		if strings.Contains(r.Reason, want) {
			cells, _ := ingest.SplitKey(r.Key, 2)
			if cells[0] != long[:ingest.MaxKeyCellBytes]+"..." || cells[1] != "dunmore" {
				t.Fatalf("rejected key %q", r.Key[:min(len(r.Key), 300)])
			}
			return
		}
	}
	t.Fatalf("no rejection with %q in %d rows", want, len(rejected))
}
