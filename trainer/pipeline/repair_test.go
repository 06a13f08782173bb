package pipeline

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"almanac.dev/almanac/trainer/runconfig"
	"almanac.dev/almanac/trainer/store"
)

// Issue 18 case 5: a damaged latest.json used to fail every later plan, train and publish
// (exit 4, then 3) until a person repaired it. Now the next run reads the newest intact run
// from the manifest chain and publish rewrites latest.json, each damage in turn.
func TestDamagedLatestIsRepairedFromTheChain(t *testing.T) {
	damages := map[string]func(out string){
		"not a pointer": func(out string) { os.WriteFile(filepath.Join(out, "latest.json"), []byte(`{"run": "flp-00`), 0o644) },
		"empty":         func(out string) { os.WriteFile(filepath.Join(out, "latest.json"), nil, 0o644) },
		"naming a run that was never published": func(out string) {
			os.WriteFile(filepath.Join(out, "latest.json"), []byte(`{"run":"flp-0009","manifest":"runs/flp-0009/MANIFEST.json","manifestSHA256":"00"}`), 0o644)
		},
		"with another checksum": func(out string) {
			f, _ := os.OpenFile(filepath.Join(out, "runs", "flp-0002", "MANIFEST.json"), os.O_APPEND|os.O_WRONLY, 0)
			f.WriteString("\n")
			f.Close()
		},
	}
	for name, damage := range damages {
		t.Run(name, func(t *testing.T) {
			dir, _, cfg2 := publishedObjectRun(t)
			if _, errs := runAll(t, cfg2); errs[0] != nil {
				t.Fatal(errs)
			}
			out := filepath.Join(dir, "out")
			damage(out)
			st := mustOpen(t, cfg2.Output.URI)
			if _, _, err := st.ReadLatest(context.Background()); err == nil {
				t.Fatal("the damage did not damage latest.json")
			}
			// The chain: flp-0001 <- flp-0002, both intact; flp-0002 is the newest.
			p, ok, err := rebuildLatest(context.Background(), st)
			if err != nil || !ok || p.Run != "flp-0002" {
				t.Fatalf("rebuilt %+v %v %v, want flp-0002", p, ok, err)
			}
			cfg3 := testConfig("flp-0003", cfg2.Source.URI, cfg2.Output.URI)
			cfg3.Source.Partitioning = runconfig.PartitionObjects
			runAll(t, cfg3)
			m := checkPublished(t, st, "flp-0003")
			if m.PreviousRun != "flp-0002" {
				t.Fatalf("flp-0003 followed %q, want flp-0002", m.PreviousRun)
			}
		})
	}
}

// A refused run still repairs latest.json; the newest run whose files are not intact is
// passed over for its predecessor; with no intact run left latest.json is removed and the
// next run is a first run.
func TestRepairPassesOverDamagedRuns(t *testing.T) {
	dir, _, cfg2 := publishedObjectRun(t)
	if _, errs := runAll(t, cfg2); errs[0] != nil {
		t.Fatal(errs)
	}
	out := filepath.Join(dir, "out")
	st := mustOpen(t, cfg2.Output.URI)
	os.WriteFile(filepath.Join(out, "latest.json"), []byte("garbage"), 0o644)
	// flp-0002 loses a file its manifest lists: flp-0001 is the newest intact run.
	m2, _ := readManifest(context.Background(), st, "flp-0002")
	os.Remove(filepath.Join(out, filepath.FromSlash(m2.Units[0].Files[0].Key)))
	cfg3 := testConfig("flp-0003", cfg2.Source.URI, cfg2.Output.URI)
	cfg3.Source.Partitioning = runconfig.PartitionObjects
	cfg3.Source.Frequency = "Monthly" // every series rejected: the guard refuses the run
	_, err := runToPublish(t, cfg3, nil)
	refusedLeavesLatest(t, cfg3, "flp-0001", err, "planned series forecast")

	// Every manifest damaged: nothing intact is left; latest.json goes, the next run is a first run.
	for _, run := range []string{"flp-0001", "flp-0002"} {
		os.WriteFile(filepath.Join(out, "runs", run, store.ManifestName), []byte("{"), 0o644)
	}
	os.WriteFile(filepath.Join(out, "latest.json"), []byte("garbage"), 0o644)
	cfg4 := testConfig("flp-0004", cfg2.Source.URI, cfg2.Output.URI)
	cfg4.Source.Partitioning = runconfig.PartitionObjects
	runAll(t, cfg4)
	if m := checkPublished(t, st, "flp-0004"); m.PreviousRun != "" {
		t.Fatalf("flp-0004 followed %q, want a first run", m.PreviousRun)
	}
}
