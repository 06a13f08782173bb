// Package s3test starts the S3-compatible test server for tests that need a real s3:// store.
//
// The server is test/tools/s3server: gofakes3 (MIT license, pure Go, in-memory backend) behind a
// tiny main, built from the Go module proxy by `make s3server` into bin/s3server (versitygw was
// the first choice, but the module proxy does not serve it here; see PROJECT-NOTES.md). Tests
// find it through ALMANAC_S3_SERVER (the Makefile sets it) or at <repository>/bin/s3server, and
// skip, saying so, when it is absent.
package s3test

import (
	"bufio"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// Server is a running test server.
type Server struct {
	// Endpoint is the server's host:port on 127.0.0.1.
	Endpoint string
	cmd      *exec.Cmd
}

// Start starts the server with one bucket, stops it when the test ends, and puts static test-only
// credentials into the environment, where the SDK reads them exactly as a pod reads its Secret.
func Start(t testing.TB, bucket string) *Server {
	t.Helper()
	cmd := exec.Command(binary(t), "-addr", "127.0.0.1:0", "-bucket", bucket)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cmd.Process.Kill(); _ = cmd.Wait() })
	line := make(chan string, 1)
	go func() {
		sc := bufio.NewScanner(out)
		sc.Scan()
		line <- sc.Text()
	}()
	var endpoint string
	select {
	case l := <-line:
		endpoint = strings.TrimPrefix(l, "listening on ")
	case <-time.After(20 * time.Second):
		t.Fatal("s3server did not report its address")
	}
	if endpoint == "" {
		t.Fatal("s3server printed nothing")
	}
	t.Setenv("AWS_ACCESS_KEY_ID", "almanac-test")
	t.Setenv("AWS_SECRET_ACCESS_KEY", "almanac-test-secret")
	t.Setenv("AWS_REGION", "us-east-1")
	return &Server{Endpoint: endpoint, cmd: cmd}
}

// URI is the s3:// URI of prefix (a key prefix ending in "/", or "") in bucket on this server.
func (s *Server) URI(bucket, prefix string) string {
	return "s3://" + bucket + "/" + prefix + "?endpoint=" + s.Endpoint + "&use_path_style=true&disable_https=true&region=us-east-1"
}

// Kill stops the server at once, for tests of storage that goes away mid-read.
func (s *Server) Kill() {
	_ = s.cmd.Process.Kill()
	_ = s.cmd.Wait()
}

// binary finds the server: ALMANAC_S3_SERVER (absolute, or relative to the working directory or
// to the repository root; set but missing is an error), else <repository>/bin/s3server.
func binary(t testing.TB) string {
	t.Helper()
	root := repoRoot()
	if p := os.Getenv("ALMANAC_S3_SERVER"); p != "" {
		for _, c := range []string{p, filepath.Join(root, p)} {
			if _, err := os.Stat(c); err == nil {
				abs, _ := filepath.Abs(c)
				return abs
			}
		}
		t.Fatalf("ALMANAC_S3_SERVER=%s does not exist", p)
	}
	p := filepath.Join(root, "bin", "s3server")
	if _, err := os.Stat(p); err != nil {
		t.Skip("no S3 test server: run `make s3server` or set ALMANAC_S3_SERVER")
	}
	return p
}

// repoRoot walks up from the working directory (a test's package directory) to the directory
// holding test/tools/s3server.
func repoRoot() string {
	dir, _ := os.Getwd()
	for d := dir; ; d = filepath.Dir(d) {
		if _, err := os.Stat(filepath.Join(d, "test", "tools", "s3server")); err == nil {
			return d
		}
		if filepath.Dir(d) == d {
			return dir
		}
	}
}

// Silent starts a TCP listener on 127.0.0.1 that accepts connections and never answers them,
// the stalled endpoint of issue 18 case 2, and returns its host:port; it closes when the
// test ends.
func Silent(t testing.TB) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	var conns []net.Conn
	done := make(chan struct{})
	go func() {
		defer close(done)
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			conns = append(conns, c) // held open, never read or written
		}
	}()
	t.Cleanup(func() {
		ln.Close()
		<-done
		for _, c := range conns {
			c.Close()
		}
	})
	return ln.Addr().String()
}

// SilentURI is an s3:// URI of prefix in bucket on a Silent endpoint; the test credentials
// are put into the environment as Start does, so the SDK asks no metadata service.
func SilentURI(t testing.TB, bucket, prefix string) string {
	t.Setenv("AWS_ACCESS_KEY_ID", "almanac-test")
	t.Setenv("AWS_SECRET_ACCESS_KEY", "almanac-test-secret")
	t.Setenv("AWS_REGION", "us-east-1")
	t.Setenv("AWS_EC2_METADATA_DISABLED", "true")
	return "s3://" + bucket + "/" + prefix + "?endpoint=http://" + Silent(t) + "&use_path_style=true&disable_https=true&region=us-east-1"
}
