package cli_test

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"
)

// TestServeTLS serves HTTPS from a certificate and key file (a
// self-signed certificate for 127.0.0.1 made here), and checks a client
// that trusts that certificate only gets the API over TLS with HSTS (RFC
// 6797); that the two flags go together; and that serving a non-loopback
// address without TLS logs the warning.
func TestServeTLS(t *testing.T) {
	dir := t.TempDir()
	data := filepath.Join(dir, "data")
	t.Setenv("FLOWCAT_MASTER_KEY", "")
	t.Setenv("FLOWCAT_MASTER_KEY_FILE", "")
	if code, _, errs := run(t, nil, "init", "--data", data); code != 0 {
		t.Fatalf("init: %s", errs)
	}
	certFile, keyFile, pool := selfSigned(t, dir)

	if code, _, errs := run(t, nil, "serve", "--data", data, "--tls-cert", certFile); code != 2 || !strings.Contains(errs, "go together") {
		t.Fatalf("--tls-cert alone: exit %d %q", code, errs)
	}
	if code, _, errs := run(t, nil, "serve", "--data", data, "--addr", "127.0.0.1:0", "--tls-cert", certFile, "--tls-key", certFile); code == 0 || !strings.Contains(errs, "--tls-key") {
		t.Fatalf("a certificate as its own key: exit %d %q", code, errs)
	}

	_, serveErr, stop := background(t, "serve", "--data", data, "--addr", "127.0.0.1:0", "--tls-cert", certFile, "--tls-key", keyFile)
	httpsRE := regexp.MustCompile(`"url":"(https://127\.0\.0\.1:\d+)"`)
	url := waitFor(t, "the server's https URL in its log", func() string {
		if m := httpsRE.FindStringSubmatch(serveErr.String()); m != nil {
			return m[1]
		}
		return ""
	})
	cl := &http.Client{Transport: &http.Transport{TLSClientConfig: &tls.Config{RootCAs: pool}}, Timeout: 10 * time.Second}
	res, err := cl.Get(url + "/api/v1/health")
	if err != nil {
		t.Fatal(err)
	}
	res.Body.Close()
	if res.StatusCode != 200 || res.TLS == nil || res.Header.Get("Strict-Transport-Security") == "" {
		t.Fatalf("health over TLS: %d, TLS %v, HSTS %q", res.StatusCode, res.TLS != nil, res.Header.Get("Strict-Transport-Security"))
	}
	// A client that does not trust the certificate gets no answer.
	if _, err := (&http.Client{Timeout: 10 * time.Second}).Get(url + "/api/v1/health"); err == nil {
		t.Fatal("a client without the certificate in its roots connected")
	}
	if strings.Contains(serveErr.String(), "WITHOUT TLS") {
		t.Error("warned about clear text while serving TLS")
	}
	stop()

	_, plainErr, stop2 := background(t, "serve", "--data", data, "--addr", "0.0.0.0:0")
	defer stop2()
	waitFor(t, "the warning about clear text", func() string {
		if strings.Contains(plainErr.String(), "SERVING WITHOUT TLS ON A NON-LOOPBACK ADDRESS") {
			return "ok"
		}
		return ""
	})
}

// selfSigned writes a self-signed ECDSA certificate for 127.0.0.1 and
// its key as PEM files, and returns a pool trusting it.
func selfSigned(t *testing.T, dir string) (certFile, keyFile string, pool *x509.CertPool) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "flowcat test"},
		NotBefore: time.Now().Add(-time.Hour), NotAfter: time.Now().Add(time.Hour),
		IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}, KeyUsage: x509.KeyUsageDigitalSignature,
		ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kb, err := x509.MarshalECPrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	if err := os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb}), 0o600); err != nil {
		t.Fatal(err)
	}
	c, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatal(err)
	}
	pool = x509.NewCertPool()
	pool.AddCert(c)
	return certFile, keyFile, pool
}
