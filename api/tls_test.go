package api

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"os"
	"path/filepath"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/residua/residua/client"
)

// writeSelfSigned writes a self-signed certificate for the names the tests
// dial ("bufconn") and its key as PEM files.
func writeSelfSigned(t *testing.T, dir string) (certFile, keyFile string) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1),
		Subject:      pkix.Name{CommonName: "residua test"},
		DNSNames:     []string{"bufconn", "localhost"},
		NotBefore:    time.Now().Add(-time.Hour),
		NotAfter:     time.Now().Add(time.Hour),
		KeyUsage:     x509.KeyUsageDigitalSignature | x509.KeyUsageCertSign,
		ExtKeyUsage:  []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
		IsCA:         true, BasicConstraintsValid: true,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kder, err := x509.MarshalPKCS8PrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	if err := os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "PRIVATE KEY", Bytes: kder}), 0o600); err != nil {
		t.Fatal(err)
	}
	return certFile, keyFile
}

// TestTLS: a TLS server answers a client that trusts its certificate and
// refuses a plaintext one.
func TestTLS(t *testing.T) {
	dir := t.TempDir()
	cert, key := writeSelfSigned(t, dir)
	tokenFile := filepath.Join(dir, "token")
	if err := os.WriteFile(tokenFile, []byte("tls-token"), 0o600); err != nil {
		t.Fatal(err)
	}
	h := startServer(t, Config{TLSCert: cert, TLSKey: key, TokenFile: tokenFile})
	ctx := context.Background()
	c := h.dial(t, client.WithCAFile(cert), client.WithTokenFile(tokenFile))
	if _, err := c.Jobs(ctx); err != nil {
		t.Fatalf("TLS client with token: %v", err)
	}
	plain := h.dial(t, client.WithTokenFile(tokenFile))
	tctx, cancel := context.WithTimeout(ctx, 5*time.Second)
	defer cancel()
	if _, err := plain.Jobs(tctx); status.Code(err) != codes.Unavailable {
		t.Errorf("plaintext client against a TLS server: %v, want UNAVAILABLE", err)
	}
	if _, err := NewServer(Config{TLSCert: cert}); err == nil {
		t.Errorf("a certificate without a key was accepted")
	}
}
