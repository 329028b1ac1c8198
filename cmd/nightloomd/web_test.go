package main

import (
	"bytes"
	"context"
	"crypto/tls"
	"io"
	"net"
	"net/http"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// freeAddr returns a loopback address with a port free at the moment.
func freeAddr(t *testing.T) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().String()
}

func TestWebFlagsRefused(t *testing.T) {
	db := filepath.Join(t.TempDir(), "n.db")
	for _, tc := range []struct {
		args []string
		flag string
	}{
		{[]string{"--http-addr", "0.0.0.0:7880"}, "--http-addr"},
		{[]string{"--http-addr", "nonsense"}, "--http-addr"},
		{[]string{"--web-public", "site-x"}, "--web-public"},
		{[]string{"--web-metrics"}, "--web-metrics"},
		{[]string{"--http-addr", "127.0.0.1:0", "--web-public", "site-nope"}, "--web-public"},
		{[]string{"--http-addr", "127.0.0.1:0", "--web-session-ttl", "0s"}, "--web-session-ttl"},
	} {
		code, _, stderr := runCmd(t, append(tc.args, "--db", db, "--listen", freeAddr(t))...)
		if code != 2 || !strings.Contains(stderr, tc.flag) {
			t.Errorf("%v: exit %d, stderr %q; want 2 naming %s", tc.args, code, stderr, tc.flag)
		}
	}
}

// TestWebListener: the daemon serves the pages, /healthz and, when asked,
// /metrics on --http-addr, and stops on its context.
func TestWebListener(t *testing.T) {
	addr := freeAddr(t)
	ctx, cancel := context.WithCancel(context.Background())
	var errb bytes.Buffer
	done := make(chan int, 1)
	go func() {
		done <- run(ctx, []string{"--db", filepath.Join(t.TempDir(), "n.db"), "--listen", freeAddr(t), "--http-addr", addr,
			"--web-metrics"}, io.Discard, &errb)
	}()
	var resp *http.Response
	var err error
	for i := 0; i < 100; i++ {
		if resp, err = http.Get("http://" + addr + "/healthz"); err == nil {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	if err != nil {
		cancel()
		t.Fatalf("healthz: %v", err)
	}
	resp.Body.Close()
	if resp.StatusCode != 200 {
		t.Errorf("healthz: %d", resp.StatusCode)
	}
	for path, want := range map[string]string{"/signin": "Sign in", "/metrics": "nightloom_"} {
		resp, err := http.Get("http://" + addr + path)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != 200 || !strings.Contains(string(b), want) {
			t.Errorf("%s: %d, body lacks %q", path, resp.StatusCode, want)
		}
	}
	cancel()
	select {
	case code := <-done:
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errb.String())
		}
	case <-time.After(20 * time.Second):
		t.Fatal("the daemon did not stop")
	}
	if !strings.Contains(errb.String(), "web pages serving") {
		t.Errorf("no start log line: %s", errb.String())
	}
}

// TestWebListenerTLS: with --tls-cert/--tls-key and --client-ca the web
// listener may bind every interface, speaks only TLS, asks for a client
// certificate the CA signed, and marks its cookies Secure.
func TestWebListenerTLS(t *testing.T) {
	p := newTestPKI(t)
	_, port, err := net.SplitHostPort(freeAddr(t))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	var errb bytes.Buffer
	done := make(chan int, 1)
	go func() {
		done <- run(ctx, []string{"--db", filepath.Join(t.TempDir(), "n.db"), "--listen", freeAddr(t),
			"--http-addr", "0.0.0.0:" + port, "--tls-cert", p.certFile, "--tls-key", p.keyFile, "--client-ca", p.caFile},
			io.Discard, &errb)
	}()
	defer func() {
		cancel()
		select {
		case code := <-done:
			if code != 0 {
				t.Errorf("exit %d: %s", code, errb.String())
			}
		case <-time.After(20 * time.Second):
			t.Error("the daemon did not stop")
		}
	}()
	client := func(cert *tls.Certificate) *http.Client {
		tc := &tls.Config{RootCAs: p.pool, ServerName: "127.0.0.1", MinVersion: tls.VersionTLS12}
		if cert != nil {
			tc.Certificates = []tls.Certificate{*cert}
		}
		return &http.Client{Timeout: 10 * time.Second, Transport: &http.Transport{TLSClientConfig: tc}}
	}
	base := "https://127.0.0.1:" + port
	var resp *http.Response
	for i := 0; i < 100; i++ {
		if resp, err = client(&p.client).Get(base + "/signin"); err == nil {
			break
		}
		time.Sleep(50 * time.Millisecond)
	}
	if err != nil {
		t.Fatalf("https with a client certificate: %v", err)
	}
	resp.Body.Close()
	if resp.StatusCode != 200 || len(resp.Cookies()) == 0 {
		t.Fatalf("sign-in form over TLS: %d, %d cookies", resp.StatusCode, len(resp.Cookies()))
	}
	for _, c := range resp.Cookies() {
		if !c.Secure || !c.HttpOnly {
			t.Errorf("cookie %s over TLS: Secure %v HttpOnly %v", c.Name, c.Secure, c.HttpOnly)
		}
	}
	for name, c := range map[string]*http.Client{"no client certificate": client(nil), "a stranger's certificate": client(&p.stranger)} {
		if resp, err := c.Get(base + "/healthz"); err == nil {
			resp.Body.Close()
			t.Errorf("%s: got %d, want the handshake refused", name, resp.StatusCode)
		}
	}
	if resp, err := http.Get("http://127.0.0.1:" + port + "/healthz"); err == nil {
		resp.Body.Close()
		if resp.StatusCode == 200 {
			t.Errorf("plaintext HTTP was served on the TLS listener")
		}
	}
}
