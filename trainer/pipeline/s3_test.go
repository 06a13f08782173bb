package pipeline

import (
	"context"
	"strings"
	"testing"

	"almanac.dev/almanac/test/s3test"
	"almanac.dev/almanac/trainer/runconfig"
)

func TestEndToEndOnS3(t *testing.T) {
	// Credentials reach the SDK from the environment only, as in a pod with envFrom.
	server := s3test.Start(t, "flp-forecasts")
	q := strings.TrimPrefix(server.URI("flp-forecasts", ""), "s3://flp-forecasts/")
	in := mustOpen(t, "s3://flp-forecasts/"+q)
	putInput(t, in)
	cfg := testConfig("flp-0001", "s3://flp-forecasts/in/"+q, "s3://flp-forecasts/portfolio/"+q)
	cfg.Source.Partitioning = runconfig.PartitionObjects
	ctx := context.Background()
	if _, err := RunLocal(ctx, cfg, testEnv()); err != nil {
		t.Fatal(err)
	}
	out := mustOpen(t, cfg.Output.URI)
	m := checkPublished(t, out, "flp-0001")
	if !m.Complete || m.Totals.Series.Trained != 6 {
		t.Fatalf("manifest totals %+v", m.Totals)
	}
	// Second run after an object vanished: its unit is carried forward from the first run.
	cfg2 := testConfig("flp-0002", cfg.Source.URI, cfg.Output.URI)
	cfg2.Source.Partitioning = runconfig.PartitionObjects
	ps, err := RunPlan(ctx, cfg2, testEnv())
	if err != nil {
		t.Fatal(err)
	}
	if err := in.Delete(ctx, "in/depot-ashby.csv"); err != nil {
		t.Fatal(err)
	}
	for i := 0; i < ps.Shards; i++ {
		RunTrain(ctx, cfg2, i, testEnv())
	}
	s, err := RunPublish(ctx, cfg2, testEnv())
	if err != nil || s.CarriedForward != 1 {
		t.Fatalf("publish: %+v, %v", s, err)
	}
	checkPublished(t, out, "flp-0002")
	var sb strings.Builder
	if err := Inspect(ctx, cfg.Output.URI, "", &sb); err != nil || strings.Contains(sb.String(), "flp-test-secret") {
		t.Fatalf("inspect: %v\n%s", err, sb.String())
	}
}
