package main

import (
	"bytes"
	"crypto/tls"
	"crypto/x509"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"tautline/server"
)

func TestCertsWritesUsableKeyPairs(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "certs")
	var out, errOut bytes.Buffer
	if code := run([]string{"certs", "--out", dir, "-hosts", "localhost,tautlined.cell-a.svc", "-controller-identity", "cell-a-controller.test"}, &out, &errOut); code != 0 {
		t.Fatalf("exit %d: %s", code, errOut.String())
	}
	for _, pair := range [][2]string{
		{server.DevServerFile, server.DevServerKey},
		{server.DevControlFile, server.DevControlKey},
		{server.DevWatchFile, server.DevWatchKey},
	} {
		// The key matches its certificate.
		if _, err := tls.LoadX509KeyPair(filepath.Join(dir, pair[0]), filepath.Join(dir, pair[1])); err != nil {
			t.Fatalf("%s with %s: %v", pair[0], pair[1], err)
		}
		if !strings.Contains(out.String(), filepath.Join(dir, pair[0])) {
			t.Errorf("output does not list %s:\n%s", pair[0], out.String())
		}
	}
	kp, _ := tls.X509KeyPair(mustRead(t, filepath.Join(dir, server.DevServerFile)), mustRead(t, filepath.Join(dir, server.DevServerKey)))
	leaf, err := x509.ParseCertificate(kp.Certificate[0])
	if err != nil {
		t.Fatal(err)
	}
	if err := leaf.VerifyHostname("tautlined.cell-a.svc"); err != nil {
		t.Errorf("the -hosts name: %v", err)
	}
	ctl, _ := tls.X509KeyPair(mustRead(t, filepath.Join(dir, server.DevControlFile)), mustRead(t, filepath.Join(dir, server.DevControlKey)))
	c, _ := x509.ParseCertificate(ctl.Certificate[0])
	if ids := server.CertIdentities(c); len(ids) != 1 || ids[0] != "cell-a-controller.test" {
		t.Errorf("controller identities %q", ids)
	}

	// A second run keeps the files unless -force.
	out.Reset()
	errOut.Reset()
	if code := run([]string{"certs", "-out", dir}, &out, &errOut); code != 1 || !strings.Contains(errOut.String(), "exists") {
		t.Errorf("second run: exit %d, %q; want 1 and a refusal", code, errOut.String())
	}
	if code := run([]string{"certs", "-out", dir, "-force"}, &out, &errOut); code != 0 {
		t.Errorf("second run with -force: exit %d, %s", code, errOut.String())
	}
}

func TestCertsUsage(t *testing.T) {
	for _, args := range [][]string{
		{"certs"},
		{"certs", "-out", t.TempDir(), "extra"},
		{"certs", "-out", t.TempDir(), "-valid-days", "0"},
		{"certs", "-out", t.TempDir(), "-hosts", " , "},
	} {
		var out, errOut bytes.Buffer
		if code := run(args, &out, &errOut); code != 2 {
			t.Errorf("%q: exit %d, want 2 (usage)", args, code)
		}
	}
}

func mustRead(t *testing.T, p string) []byte {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
