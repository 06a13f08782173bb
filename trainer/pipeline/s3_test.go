package pipeline

import (
	"bufio"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"almanac.dev/almanac/trainer/runconfig"
)

// s3Endpoint starts the S3-compatible test server (test/tools/s3server, gofakes3; see
// test/storage) named by ALMANAC_S3_SERVER and returns its host:port; without the variable
// the test is skipped.
func s3Endpoint(t *testing.T) string {
	bin := os.Getenv("ALMANAC_S3_SERVER")
	if bin == "" {
		t.Skip("ALMANAC_S3_SERVER is unset (make s3server; ALMANAC_S3_SERVER=$PWD/bin/s3server)")
	}
	if !filepath.IsAbs(bin) {
		bin = filepath.Join("..", "..", bin) // relative to the repository root
	}
	cmd := exec.Command(bin, "-addr", "127.0.0.1:0", "-bucket", "flp-forecasts")
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cmd.Process.Kill(); _ = cmd.Wait() })
	addr := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(stdout)
		sc.Scan()
		addr <- strings.TrimPrefix(sc.Text(), "listening on ")
	}()
	select {
	case a := <-addr:
		return a
	case <-time.After(20 * time.Second):
		t.Fatal("s3server did not report its address")
		return ""
	}
}

func TestEndToEndOnS3(t *testing.T) {
	ep := s3Endpoint(t)
	// Credentials reach the SDK from the environment only, as in a pod with envFrom.
	t.Setenv("AWS_ACCESS_KEY_ID", "flp-test")
	t.Setenv("AWS_SECRET_ACCESS_KEY", "flp-test-secret")
	t.Setenv("AWS_REGION", "us-east-1")
	q := "?endpoint=" + ep + "&use_path_style=true&disable_https=true&region=us-east-1"
	in := mustOpen(t, "s3://flp-forecasts/"+q)
	putInput(t, in)
	cfg := testConfig("flp-0001", "s3://flp-forecasts/in/"+q, "s3://flp-forecasts/portfolio/"+q)
	cfg.Source.Partitioning = runconfig.PartitionObject
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
	cfg2.Source.Partitioning = runconfig.PartitionObject
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
