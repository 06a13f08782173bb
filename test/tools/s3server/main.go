// Command s3server is the S3-compatible server the storage integration tests start on 127.0.0.1.
//
// It wraps gofakes3 (github.com/johannesboyne/gofakes3, MIT license) with its in-memory backend:
// pure Go, no cgo, no container engine and no other service, so CI builds it from the Go module
// proxy in seconds. (versitygw, the first choice, is not served by the module proxy here.)
//
// Usage:
//
//	s3server -addr 127.0.0.1:0 -bucket almanac-test
//
// It prints "listening on http://HOST:PORT" on stdout once it accepts connections, then serves
// until killed. Build it into bin/ with:
//
//	cd test/tools/s3server && go build -o ../../../bin/s3server .
package main

import (
	"flag"
	"fmt"
	"log"
	"net"
	"net/http"
	"os"
	"strings"

	"github.com/johannesboyne/gofakes3"
	"github.com/johannesboyne/gofakes3/backend/s3mem"
)

func main() {
	addr := flag.String("addr", "127.0.0.1:0", "listen address (loopback only)")
	buckets := flag.String("bucket", "almanac-test", "comma-separated buckets to create at start")
	flag.Parse()

	backend := s3mem.New()
	for _, b := range strings.Split(*buckets, ",") {
		if b == "" {
			continue
		}
		if err := backend.CreateBucket(b); err != nil {
			log.Fatalf("s3server: create bucket %s: %v", b, err)
		}
	}
	faker := gofakes3.New(backend, gofakes3.WithLogger(gofakes3.DiscardLog()))
	ln, err := net.Listen("tcp", *addr)
	if err != nil {
		log.Fatalf("s3server: %v", err)
	}
	fmt.Fprintf(os.Stdout, "listening on http://%s\n", ln.Addr())
	if err := http.Serve(ln, faker.Server()); err != nil {
		log.Fatalf("s3server: %v", err)
	}
}
