package main

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"io"
	"log/slog"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nightloom/nightloom/internal/server"
)

// pki is a CA with a server certificate for 127.0.0.1 and a client
// certificate, as PEM files.
type pki struct {
	ca, serverCert, serverKey, clientCert, clientKey string
}

func writeTestPKI(t *testing.T, dir string) pki {
	t.Helper()
	newKey := func() *ecdsa.PrivateKey {
		k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
		if err != nil {
			t.Fatal(err)
		}
		return k
	}
	write := func(name, typ string, der []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	caKey := newKey()
	caTmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "nightloom mTLS test CA"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour), IsCA: true,
		KeyUsage: x509.KeyUsageCertSign, BasicConstraintsValid: true}
	caDER, err := x509.CreateCertificate(rand.Reader, caTmpl, caTmpl, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	caCert, _ := x509.ParseCertificate(caDER)
	leaf := func(serial int64, cn string, usage x509.ExtKeyUsage, ips []net.IP) ([]byte, []byte) {
		k := newKey()
		tmpl := &x509.Certificate{SerialNumber: big.NewInt(serial), Subject: pkix.Name{CommonName: cn},
			NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour), IPAddresses: ips,
			KeyUsage: x509.KeyUsageDigitalSignature, ExtKeyUsage: []x509.ExtKeyUsage{usage}}
		der, err := x509.CreateCertificate(rand.Reader, tmpl, caCert, &k.PublicKey, caKey)
		if err != nil {
			t.Fatal(err)
		}
		kd, err := x509.MarshalECPrivateKey(k)
		if err != nil {
			t.Fatal(err)
		}
		return der, kd
	}
	sc, sk := leaf(2, "127.0.0.1", x509.ExtKeyUsageServerAuth, []net.IP{net.IPv4(127, 0, 0, 1)})
	cc, ck := leaf(3, "dome 2 control", x509.ExtKeyUsageClientAuth, nil)
	return pki{ca: write("ca.pem", "CERTIFICATE", caDER),
		serverCert: write("server.pem", "CERTIFICATE", sc), serverKey: write("server-key.pem", "EC PRIVATE KEY", sk),
		clientCert: write("client.pem", "CERTIFICATE", cc), clientKey: write("client-key.pem", "EC PRIVATE KEY", ck)}
}

// TestClientMutualTLS: with --tls-cert/--tls-key the client speaks mutual
// TLS; without them, or in plaintext, or against a plaintext daemon, or with
// nothing listening, the message says what failed (never "broken pipe"
// alone); a key file others can read draws a warning.
func TestClientMutualTLS(t *testing.T) {
	dir := t.TempDir()
	p := writeTestPKI(t, dir)
	ctx := context.Background()
	srv, err := server.Start(ctx, server.Config{Listen: "127.0.0.1:0", DBPath: filepath.Join(dir, "mtls.db"),
		TLSCertFile: p.serverCert, TLSKeyFile: p.serverKey, ClientCAFile: p.ca, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown(context.Background())
	token, _, err := srv.CreateToken(ctx, server.RoleAdmin, "mtls test")
	if err != nil {
		t.Fatal(err)
	}
	addr := srv.Addr().String()
	r := runBinary(t, nil, "site", "list", "--server", addr, "--token", token, "--tls-ca", p.ca,
		"--tls-cert", p.clientCert, "--tls-key", p.clientKey)
	if r.code != 0 || strings.Contains(r.stderr, "warning") {
		t.Fatalf("mutual TLS: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}

	plain := startTestDaemon(t)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	closed := lis.Addr().String()
	lis.Close()
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"no client certificate", []string{"--server", addr, "--tls-ca", p.ca}, "client certificate (--tls-cert and --tls-key)"},
		{"plaintext to a TLS daemon", []string{"--server", addr}, "probably speaks TLS"},
		{"TLS to a plaintext daemon", []string{"--server", plain.addr, "--tls-ca", p.ca}, "speaks plaintext, not TLS"},
		{"nothing listening", []string{"--server", closed}, "nothing listens"},
	}
	for _, c := range cases {
		args := append([]string{"site", "list", "--token", token, "--timeout", "5s"}, c.args...)
		r := runBinary(t, nil, args...)
		if r.code != 1 || !strings.Contains(r.stderr, c.want) {
			t.Errorf("%s: exit %d, want 1 and %q in\n%s", c.name, r.code, c.want, r.stderr)
		}
	}

	if err := os.Chmod(p.clientKey, 0o644); err != nil {
		t.Fatal(err)
	}
	r = runBinary(t, nil, "site", "list", "--server", addr, "--token", token, "--tls-ca", p.ca,
		"--tls-cert", p.clientCert, "--tls-key", p.clientKey)
	if r.code != 0 || !strings.Contains(r.stderr, "others can read it") {
		t.Errorf("key readable by others: exit %d, want 0 and a warning\n%s", r.code, r.stderr)
	}
	if r := runBinary(t, nil, "site", "list", "--server", addr, "--tls-cert", p.clientCert); r.code != 2 || !strings.Contains(r.stderr, "--tls-key") {
		t.Errorf("--tls-cert without --tls-key: exit %d\n%s", r.code, r.stderr)
	}
}
