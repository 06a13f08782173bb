package localnode

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"errors"
	"math/big"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"
)

// The container log endpoint of the kubelet API, the one path the API server calls for
// `kubectl logs` and pods/log (GET /containerLogs/<namespace>/<pod>/<container>, with the
// PodLogOptions tailLines and limitBytes as query parameters; k8s.io/kubernetes
// pkg/kubelet/server/server.go, from memory). The agent serves it over TLS on loopback with a
// throwaway self-signed certificate and writes the port into each Node's
// status.daemonEndpoints.kubeletEndpoint, where the API server looks for it. The API server
// must prefer the InternalIP address (--kubelet-preferred-address-types=InternalIP: the Node's
// Hostname address does not resolve) and, with no --kubelet-certificate-authority, does not
// verify the certificate. follow, previous, sinceSeconds and timestamps are not supported
// (answered 400 when set), nor is a container's log after the agent forgot its pod.

// serveLogs starts the endpoint on 127.0.0.1 and returns its port; it stops when ctx ends.
func (a *Agent) serveLogs(ctx context.Context) (int, error) {
	cert, err := selfSigned()
	if err != nil {
		return 0, err
	}
	ln, err := net.Listen("tcp", net.JoinHostPort(loopback, "0"))
	if err != nil {
		return 0, err
	}
	mux := http.NewServeMux()
	mux.HandleFunc("GET /containerLogs/{namespace}/{pod}/{container}", a.containerLogs)
	srv := &http.Server{Handler: mux, ReadHeaderTimeout: 10 * time.Second,
		TLSConfig: &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}}
	go func() { _ = srv.ServeTLS(ln, "", "") }()
	go func() {
		<-ctx.Done()
		_ = srv.Close()
	}()
	return ln.Addr().(*net.TCPAddr).Port, nil
}

// containerLogs answers one log request from the pod's log file.
func (a *Agent) containerLogs(w http.ResponseWriter, req *http.Request) {
	q := req.URL.Query()
	for _, unsupported := range []string{"follow", "previous", "sinceSeconds", "sinceTime", "timestamps"} {
		if v := q.Get(unsupported); v != "" && v != "false" {
			http.Error(w, "localnode: "+unsupported+" is not supported", http.StatusBadRequest)
			return
		}
	}
	key := req.PathValue("namespace") + "/" + req.PathValue("pod")
	a.mu.Lock()
	r := a.runs[key]
	a.mu.Unlock()
	container := req.PathValue("container")
	if r == nil || strings.ContainsAny(container, "/\\") || container == "" {
		http.Error(w, "localnode: no log for "+key+"/"+container, http.StatusNotFound)
		return
	}
	b, err := os.ReadFile(filepath.Join(r.dir, container+".log"))
	if errors.Is(err, os.ErrNotExist) {
		b, err = nil, nil // not started yet: an empty log
	}
	if err != nil {
		http.Error(w, "localnode: "+err.Error(), http.StatusInternalServerError)
		return
	}
	tail, err := optionalInt(q.Get("tailLines"))
	if err != nil {
		http.Error(w, "localnode: tailLines: "+err.Error(), http.StatusBadRequest)
		return
	}
	limit, err := optionalInt(q.Get("limitBytes"))
	if err != nil {
		http.Error(w, "localnode: limitBytes: "+err.Error(), http.StatusBadRequest)
		return
	}
	b = tailLog(b, tail, limit)
	w.Header().Set("Content-Type", "text/plain")
	_, _ = w.Write(b)
}

// tailLog keeps the last tail lines of b (tail < 0: all), then at most limit bytes from their
// start (limit < 0: no limit), as the kubelet applies tailLines and limitBytes.
func tailLog(b []byte, tail, limit int) []byte {
	if tail >= 0 {
		lines := bytes.SplitAfter(b, []byte("\n"))
		if len(lines[len(lines)-1]) == 0 {
			lines = lines[:len(lines)-1] // after the last newline: no line
		}
		if len(lines) > tail {
			lines = lines[len(lines)-tail:]
		}
		b = bytes.Join(lines, nil)
	}
	if limit >= 0 && len(b) > limit {
		b = b[:limit]
	}
	return b
}

func optionalInt(s string) (int, error) {
	if s == "" {
		return -1, nil
	}
	n, err := strconv.Atoi(s)
	if err != nil || n < 0 {
		return 0, errors.New("not a whole number: " + s)
	}
	return n, nil
}

// selfSigned makes a certificate for 127.0.0.1 valid for a day.
func selfSigned() (tls.Certificate, error) {
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		return tls.Certificate{}, err
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "localnode"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(24 * time.Hour),
		IPAddresses: []net.IP{net.ParseIP(loopback)}, KeyUsage: x509.KeyUsageDigitalSignature,
		ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		return tls.Certificate{}, err
	}
	return tls.Certificate{Certificate: [][]byte{der}, PrivateKey: key}, nil
}
