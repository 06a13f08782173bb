package pipeline

import (
	"bytes"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"

	"almanac.dev/almanac/trainer/ingest"
	"almanac.dev/almanac/trainer/models"
	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
	"almanac.dev/almanac/trainer/tables"
)

// awkwardKeys are (item, depot) pairs that a "/" join could not keep apart (item A/1 at depot x,
// item A at depot 1/x: one series before, rejected for differing duplicate periods) and cells
// holding quotes, commas and a line break.
var awkwardKeys = [][2]string{{"A/1", "x"}, {"A", "1/x"}, {`say "hi", ok`, "north\nyard"}, {"FLP-OATS-1KG", "ashby"}}

// awkwardCSV is 21 days of demand per key, each series its own level.
func awkwardCSV() []byte {
	var b bytes.Buffer
	w := csv.NewWriter(&b)
	w.Write([]string{"item", "depot", "date", "units", "promo_flag"})
	end := time.Date(2026, 3, 1, 0, 0, 0, 0, time.UTC)
	for i, k := range awkwardKeys {
		for d := 20; d >= 0; d-- {
			day := end.AddDate(0, 0, -d)
			w.Write([]string{k[0], k[1], day.Format(time.DateOnly), fmt.Sprint(10*(i+1) + d%3), "0"})
		}
	}
	w.Flush()
	return b.Bytes()
}

// Outputs keep item and depot as columns of their own, in CSV and Parquet, for hash buckets
// and object units; the colliding pair gives two series, both forecast.
func TestKeyColumnsInEveryOutput(t *testing.T) {
	for _, format := range []string{tables.CSV, tables.Parquet} {
		for _, part := range []string{runconfig.PartitionHashBuckets, runconfig.PartitionObjects} {
			t.Run(format+"/"+orNone(part), func(t *testing.T) {
				ctx := context.Background()
				name := fmt.Sprintf("flp-keys-%s-%s", format, part)
				in := mustOpen(t, "mem://"+name+"-in/")
				if err := in.Put(ctx, "history.csv", awkwardCSV()); err != nil {
					t.Fatal(err)
				}
				cfg := testConfig("flp-0001", "mem://"+name+"-in/", "mem://"+name+"-out/")
				cfg.Output.Format, cfg.Source.Partitioning = format, part
				cfg.Horizon, cfg.Models, cfg.Selection.BacktestOrigins = 3, []runconfig.Model{{Family: models.FamilyNaive}}, 1
				s, err := RunLocal(ctx, cfg, testEnv())
				if err != nil {
					t.Fatal(err)
				}
				if s.Trained != len(awkwardKeys) || s.Rejected != 0 {
					t.Fatalf("summary %+v, want %d series forecast and none rejected", s, len(awkwardKeys))
				}
				out := mustOpen(t, cfg.Output.URI)
				m := checkPublished(t, out, "flp-0001")
				var keys []string
				fcRows := map[string]int{}
				for _, u := range m.Units {
					for _, f := range u.Files {
						b, err := out.Get(ctx, f.Key)
						if err != nil {
							t.Fatal(err)
						}
						checkKeyColumnsFirst(t, f, b)
						switch f.Table {
						case TableModels:
							rows, err := tables.ReadModels(bytes.NewReader(b), formatOf(f), testKeys)
							if err != nil {
								t.Fatal(err)
							}
							for _, r := range rows {
								keys = append(keys, r.Key)
							}
						case TableForecasts:
							_, rows, err := tables.ReadForecasts(bytes.NewReader(b), formatOf(f), testKeys)
							if err != nil {
								t.Fatal(err)
							}
							for _, r := range rows {
								fcRows[r.Key]++
							}
						}
					}
				}
				slices.Sort(keys)
				var want []string
				for _, k := range awkwardKeys {
					want = append(want, ingest.JoinKey(k[0], k[1]))
				}
				slices.Sort(want)
				if !slices.Equal(keys, want) {
					t.Fatalf("models rows for %q, want %q", keys, want)
				}
				for _, k := range want {
					if fcRows[k] != cfg.Horizon {
						t.Errorf("series %q: %d forecast rows, want %d", k, fcRows[k], cfg.Horizon)
					}
				}
			})
		}
	}
}

// checkKeyColumnsFirst checks that a stored table has the columns item and depot: the first two
// of a CSV table, holding plain cells; Parquet columns by name.
func checkKeyColumnsFirst(t *testing.T, f File, b []byte) {
	t.Helper()
	if formatOf(f) == tables.CSV {
		recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		if len(recs[0]) < 3 || recs[0][0] != "item" || recs[0][1] != "depot" {
			t.Fatalf("%s: header %q, want item, depot first", f.Key, recs[0])
		}
		for _, r := range recs[1:] {
			if !slices.Contains(awkwardKeys, [2]string{r[0], r[1]}) {
				t.Errorf("%s: key cells %q are not an input key", f.Key, r[:2])
			}
		}
		return
	}
	pf, err := parquet.OpenFile(bytes.NewReader(b), int64(len(b)))
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, fl := range pf.Schema().Fields() {
		names = append(names, fl.Name())
	}
	if !slices.Contains(names, "item") || !slices.Contains(names, "depot") || slices.Contains(names, "series") {
		t.Fatalf("%s: columns %q, want item and depot and no series", f.Key, names)
	}
}

// inspect --series shows one series: its models row and forecast rows with the key cells as
// they were, or why it was rejected; unknown or missing key columns are configuration errors.
func TestInspectSeries(t *testing.T) {
	for _, part := range []string{runconfig.PartitionHashBuckets, runconfig.PartitionObjects} {
		t.Run(orNone(part), func(t *testing.T) {
			ctx := context.Background()
			name := "flp-inspect-" + part
			in := mustOpen(t, "mem://"+name+"-in/")
			data := append(awkwardCSV(), "FLP-JAM-340,brill,2026-03-01,n/a,0\n"...)
			if err := in.Put(ctx, "history.csv", data); err != nil {
				t.Fatal(err)
			}
			cfg := testConfig("flp-0001", "mem://"+name+"-in/", "mem://"+name+"-out/")
			cfg.Source.Partitioning = part
			cfg.Horizon, cfg.Models, cfg.Selection.BacktestOrigins = 3, []runconfig.Model{{Family: models.FamilyNaive}}, 1
			if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
				t.Fatal(err)
			}
			show := func(sel string) (string, error) {
				var b strings.Builder
				err := InspectSeries(ctx, cfg.Output.URI, "", sel, &b)
				return b.String(), err
			}
			got, err := show("item=A/1,depot=x")
			if err != nil {
				t.Fatal(err)
			}
			t.Log(got)
			for _, want := range []string{"series item=A/1,depot=x: unit ", "trained by run flp-0001",
				"models:\nitem,depot,model,params,metric,score,err_h1", "\nA/1,x,Naive,Naive lag=1 sigma=",
				"forecasts:\nitem,depot,period,step,model,mean,q10,q50,q90\nA/1,x,2026-03-02T00:00:00Z,1,Naive,",
				"\nA/1,x,2026-03-04T00:00:00Z,3,Naive,"} {
				if !strings.Contains(got, want) {
					t.Errorf("inspect item=A/1,depot=x lacks %q", want)
				}
			}
			if strings.Contains(got, "1/x") {
				t.Error("inspect item=A/1,depot=x shows rows of item A at depot 1/x")
			}
			// Names in another order; a value with quotes, a comma and a line break, quoted as in CSV.
			got, err = show(`depot="north` + "\n" + `yard",item="say ""hi"", ok"`)
			if err != nil || !strings.Contains(got, `series item="say ""hi"", ok",depot="north`+"\n"+`yard": unit`) ||
				!strings.Contains(got, "\"say \"\"hi\"\", ok\",\"north\nyard\",Naive") {
				t.Errorf("inspect of the quoted key: %v\n%s", err, got)
			}
			got, err = show("item=FLP-JAM-340,depot=brill")
			if err != nil || !strings.Contains(got, "rejected, no forecast:") || !strings.Contains(got, `"n/a"`) {
				t.Errorf("inspect of a rejected series: %v\n%s", err, got)
			}
			for sel, want := range map[string]string{
				"item=A/1":                 `no value for key column "depot"`,
				"item=A/1,depot=x,shelf=3": `"shelf" is not a key column of this run (item, depot)`,
				"item=A/1,item=A,depot=x":  `"item" given twice`,
				"item=A/1,depotx":          `field "depotx" is not name=value`,
				"item=A/1,depot=nowhere":   "is not in run flp-0001",
				"item=\"A/1,depot=x":       `field "item": the quoted value does not end`,
				"item=\"A/1\"x,depot=x":    `field "item": text after the quoted value`,
				"":                         "empty",
				"item=A/1,depot=x,":        "ends with a comma",
			} {
				_, err := show(sel)
				if err == nil || !strings.Contains(err.Error(), want) || !errors.Is(err, ErrConfig) {
					t.Errorf("--series %q: %v, want a configuration error with %q", sel, err, want)
				}
			}
		})
	}
}

// A key column named like an output column cannot keep its own name in the tables: plan
// refuses the configuration before reading any input.
func TestKeyColumnNamedLikeAnOutputColumn(t *testing.T) {
	cfg := testConfig("flp-0001", "mem://flp-nowhere-in/", "mem://flp-reserved-out/")
	cfg.Source.Columns.Series = []string{"item", "period"}
	_, err := RunPlan(context.Background(), cfg, testEnv())
	if err == nil || !errors.Is(err, ErrConfig) || !strings.Contains(err.Error(), `series key column 1: "period" is the name of an output table column`) {
		t.Fatalf("err = %v", err)
	}
}

// toSeriesColumn rewrites a CSV table as releases before key columns wrote it: the first n
// columns joined with "/" into one series column.
func toSeriesColumn(t *testing.T, b []byte, n int) []byte {
	t.Helper()
	recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	w := csv.NewWriter(&out)
	for i, r := range recs {
		first := strings.Join(r[:n], "/")
		if i == 0 {
			first = "series"
		}
		w.Write(append([]string{first}, r[n:]...))
	}
	w.Flush()
	return out.Bytes()
}

// rewriteAsSeriesColumn turns run's published CSV tables into the older layout, with the
// manifest's checksums and latest.json following, as if an earlier release had published it.
func rewriteAsSeriesColumn(t *testing.T, out *store.Store, run string) {
	t.Helper()
	ctx := context.Background()
	m, err := readManifest(ctx, out, run)
	if err != nil {
		t.Fatal(err)
	}
	for i := range m.Units {
		for j := range m.Units[i].Files {
			f := &m.Units[i].Files[j]
			b, err := out.Get(ctx, f.Key)
			if err != nil {
				t.Fatal(err)
			}
			b = toSeriesColumn(t, b, 2)
			if err := out.Put(ctx, f.Key, b); err != nil {
				t.Fatal(err)
			}
			f.Bytes, f.SHA256 = int64(len(b)), store.SHA256(b)
		}
	}
	mk := store.RunKey(run, store.ManifestName)
	mb, err := out.PutJSON(ctx, mk, m)
	if err != nil {
		t.Fatal(err)
	}
	if err := out.WriteLatest(ctx, store.Pointer{Run: run, Manifest: mk, ManifestSHA256: store.SHA256(mb)}); err != nil {
		t.Fatal(err)
	}
}
