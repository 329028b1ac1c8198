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

// writeTestCA makes a CA and a certificate for 127.0.0.1 signed by it, and
// writes the CA, the certificate and its key as PEM files in dir.
func writeTestCA(t *testing.T, dir string) (caFile, certFile, keyFile string) {
	t.Helper()
	caKey, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	ca := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "nightloom test CA"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour), IsCA: true,
		KeyUsage: x509.KeyUsageCertSign, BasicConstraintsValid: true}
	caDER, err := x509.CreateCertificate(rand.Reader, ca, ca, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	leaf := &x509.Certificate{SerialNumber: big.NewInt(2), Subject: pkix.Name{CommonName: "127.0.0.1"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IPAddresses: []net.IP{net.IPv4(127, 0, 0, 1)}, KeyUsage: x509.KeyUsageDigitalSignature,
		ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}}
	caCert, _ := x509.ParseCertificate(caDER)
	leafDER, err := x509.CreateCertificate(rand.Reader, leaf, caCert, &key.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	keyDER, err := x509.MarshalECPrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	write := func(name, typ string, der []byte) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	return write("ca.pem", "CERTIFICATE", caDER), write("cert.pem", "CERTIFICATE", leafDER), write("key.pem", "EC PRIVATE KEY", keyDER)
}

// --tls-ca: the client verifies the daemon's certificate against the CA
// and refuses a daemon it cannot verify.
func TestClientTLS(t *testing.T) {
	dir := t.TempDir()
	caFile, certFile, keyFile := writeTestCA(t, dir)
	ctx := context.Background()
	srv, err := server.Start(ctx, server.Config{Listen: "127.0.0.1:0", DBPath: filepath.Join(dir, "tls.db"),
		TLSCertFile: certFile, TLSKeyFile: keyFile, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Shutdown(context.Background())
	token, _, err := srv.CreateToken(ctx, server.RoleAdmin, "tls test")
	if err != nil {
		t.Fatal(err)
	}
	addr := srv.Addr().String()
	r := runBinary(t, nil, "site", "create", "--file", demoFile("site.json"), "--server", addr, "--token", token, "--tls-ca", caFile)
	if r.code != 0 || !strings.Contains(r.stdout, "Colline aux Hiboux") {
		t.Errorf("over TLS: exit %d\n%s%s", r.code, r.stdout, r.stderr)
	}
	// Plaintext to a TLS daemon fails, and so does a CA that did not sign
	// its certificate.
	if r := runBinary(t, nil, "site", "list", "--server", addr, "--token", token, "--timeout", "5s"); r.code != 1 {
		t.Errorf("plaintext to a TLS daemon: exit %d\n%s", r.code, r.stderr)
	}
	otherCA, _, _ := writeTestCA(t, t.TempDir())
	if r := runBinary(t, nil, "site", "list", "--server", addr, "--token", token, "--tls-ca", otherCA, "--timeout", "5s"); r.code != 1 ||
		!strings.Contains(r.stderr, "certificate") {
		t.Errorf("unknown CA: exit %d\n%s", r.code, r.stderr)
	}
	if r := runBinary(t, nil, "site", "list", "--server", addr, "--tls-ca", filepath.Join(dir, "none.pem")); r.code != 2 ||
		!strings.Contains(r.stderr, "flag --tls-ca") {
		t.Errorf("missing CA file: exit %d\n%s", r.code, r.stderr)
	}
}
