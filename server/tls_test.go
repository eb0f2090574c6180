package server

import (
	"crypto/tls"
	"crypto/x509"
	"encoding/pem"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

func TestCheckListenSecurity(t *testing.T) {
	for _, c := range []struct {
		addr              string
		tlsOn, insecureOK bool
		loopback, refused bool
	}{
		{DefaultListen, false, false, true, false},
		{"127.0.0.1:7461", false, false, true, false},
		{"127.8.9.10:7461", false, false, true, false}, // all of 127.0.0.0/8 is loopback (RFC 1122 §3.2.1.3)
		{"[::1]:7461", false, false, true, false},
		{"localhost:7461", false, false, true, false},
		{"LOCALHOST:7461", false, false, true, false},
		{"0.0.0.0:7461", false, false, false, true}, // every interface
		{"[::]:7461", false, false, false, true},
		{":7461", false, false, false, true}, // empty host: every interface
		{"10.1.2.3:7461", false, false, false, true},
		{"cell-a.plant.example:7461", false, false, false, true}, // names are not resolved: beyond the machine
		{"0.0.0.0:7461", true, false, false, false},
		{"10.1.2.3:7461", false, true, false, false}, // the explicit insecure flag
		{"10.1.2.3:7461", true, true, false, false},
	} {
		err := CheckListenSecurity(c.addr, c.tlsOn, c.insecureOK)
		if refused := errors.Is(err, ErrInsecureListen); refused != c.refused || (err != nil && !refused) {
			t.Errorf("CheckListenSecurity(%q, tls %v, insecure %v) = %v, want refused %v", c.addr, c.tlsOn, c.insecureOK, err, c.refused)
		}
		if got := ListenIsLoopback(c.addr); got != c.loopback {
			t.Errorf("ListenIsLoopback(%q) = %v, want %v", c.addr, got, c.loopback)
		}
	}
	if err := CheckListenSecurity("7461", false, false); err == nil || errors.Is(err, ErrInsecureListen) {
		t.Errorf("an address without a host:port form: %v, want a format error", err)
	}
}

func TestDefaultListenIsLoopback(t *testing.T) {
	if !ListenIsLoopback(DefaultListen) {
		t.Errorf("DefaultListen %q is not loopback", DefaultListen)
	}
	if !ListenIsLoopback(DefaultMetricsListen) {
		t.Errorf("DefaultMetricsListen %q is not loopback", DefaultMetricsListen)
	}
	if err := CheckSecurityConfig(SecurityConfig{Listen: DefaultListen}); err != nil {
		t.Errorf("the default address without TLS: %v", err)
	}
}

func TestCheckSecurityConfigNamesEachProblem(t *testing.T) {
	ca := TLSFiles{CertFile: "s.pem", KeyFile: "s-key.pem", ClientCAFile: "ca.pem"}
	for _, c := range []struct {
		name string
		cfg  SecurityConfig
		want string // in the error; "" for no error
	}{
		{"mutual with a controller", SecurityConfig{Listen: "0.0.0.0:7461", TLS: ca, Authz: AuthzPolicy{Controllers: []string{"c.example"}}}, ""},
		{"plaintext beyond loopback", SecurityConfig{Listen: "0.0.0.0:7461"}, "-listen:"},
		{"insecure flag", SecurityConfig{Listen: "0.0.0.0:7461", InsecureListen: true}, ""},
		{"cert without key", SecurityConfig{Listen: DefaultListen, TLS: TLSFiles{CertFile: "s.pem"}}, "-tls-cert-file: give"},
		{"CA without cert", SecurityConfig{Listen: DefaultListen, TLS: TLSFiles{ClientCAFile: "ca.pem"}}, "-tls-client-ca-file: needs"},
		{"identities without CA", SecurityConfig{Listen: DefaultListen, Authz: AuthzPolicy{Watchers: []string{"w"}}}, "need -tls-client-ca-file"},
		{"CA without controllers", SecurityConfig{Listen: DefaultListen, TLS: ca}, "-controller-identity: none given"},
		{"wildcard controller", SecurityConfig{Listen: DefaultListen, TLS: ca, Authz: AuthzPolicy{Controllers: []string{"*"}}}, `"*" is not an identity`},
	} {
		err := CheckSecurityConfig(c.cfg)
		switch {
		case c.want == "" && err != nil:
			t.Errorf("%s: %v", c.name, err)
		case c.want != "" && (err == nil || !strings.Contains(err.Error(), c.want)):
			t.Errorf("%s: %v, want an error with %q", c.name, err, c.want)
		}
	}
}

func TestWriteDevCerts(t *testing.T) {
	dir := t.TempDir()
	now := time.Date(2026, 12, 1, 0, 0, 0, 0, time.UTC)
	paths, err := WriteDevCerts(dir, DevCertsOptions{Now: now, ServerHosts: []string{"localhost", "10.0.0.7"}})
	if err != nil {
		t.Fatal(err)
	}
	if len(paths) != 8 {
		t.Fatalf("wrote %d files, want 8: %v", len(paths), paths)
	}
	load := func(name string) *x509.Certificate {
		t.Helper()
		b, err := os.ReadFile(filepath.Join(dir, name))
		if err != nil {
			t.Fatal(err)
		}
		blk, _ := pem.Decode(b)
		if blk == nil || blk.Type != "CERTIFICATE" {
			t.Fatalf("%s: no PEM certificate", name)
		}
		c, err := x509.ParseCertificate(blk.Bytes)
		if err != nil {
			t.Fatal(err)
		}
		return c
	}
	ca := load(DevCAFile)
	roots := x509.NewCertPool()
	roots.AddCert(ca)
	at := now.Add(time.Hour)
	srv := load(DevServerFile)
	if _, err := srv.Verify(x509.VerifyOptions{Roots: roots, DNSName: "localhost", CurrentTime: at, KeyUsages: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}}); err != nil {
		t.Errorf("server certificate for localhost: %v", err)
	}
	if err := srv.VerifyHostname("10.0.0.7"); err != nil {
		t.Errorf("server certificate for the extra IP: %v", err)
	}
	if _, err := srv.Verify(x509.VerifyOptions{Roots: roots, CurrentTime: at, KeyUsages: []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth}}); err == nil {
		t.Error("the server certificate verifies as a client certificate")
	}
	for _, c := range []struct {
		file, identity string
	}{{DevControlFile, DevControllerIdentity}, {DevWatchFile, DevWatcherIdentity}} {
		cert := load(c.file)
		if _, err := cert.Verify(x509.VerifyOptions{Roots: roots, CurrentTime: at, KeyUsages: []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth}}); err != nil {
			t.Errorf("%s as a client certificate: %v", c.file, err)
		}
		if ids := CertIdentities(cert); len(ids) != 1 || ids[0] != c.identity {
			t.Errorf("%s identities %q, want [%q]", c.file, ids, c.identity)
		}
		// Default validity 30 days, from a minute before Now.
		if _, err := cert.Verify(x509.VerifyOptions{Roots: roots, CurrentTime: now.Add(31 * 24 * time.Hour), KeyUsages: []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth}}); err == nil {
			t.Errorf("%s still valid after 31 days", c.file)
		}
	}
	for _, key := range []string{DevCAKeyFile, DevServerKey, DevControlKey, DevWatchKey} {
		fi, err := os.Stat(filepath.Join(dir, key))
		if err != nil {
			t.Fatal(err)
		}
		if fi.Mode().Perm() != 0o600 {
			t.Errorf("%s mode %v, want 0600", key, fi.Mode().Perm())
		}
	}
	if _, err := WriteDevCerts(dir, DevCertsOptions{}); err == nil || !strings.Contains(err.Error(), "exists") {
		t.Errorf("second run without Overwrite: %v, want a refusal", err)
	}
	if _, err := WriteDevCerts(dir, DevCertsOptions{Overwrite: true}); err != nil {
		t.Errorf("second run with Overwrite: %v", err)
	}
	if load(DevCAFile).Equal(ca) {
		t.Error("Overwrite kept the old CA")
	}
}

func TestServerTLSConfigErrors(t *testing.T) {
	dir := t.TempDir()
	if _, err := WriteDevCerts(dir, DevCertsOptions{}); err != nil {
		t.Fatal(err)
	}
	p := func(n string) string { return filepath.Join(dir, n) }
	notPEM := p("not.pem")
	if err := os.WriteFile(notPEM, []byte("hello\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		f    TLSFiles
		want string
	}{
		{TLSFiles{CertFile: p(DevServerFile), KeyFile: p(DevControlKey)}, "-tls-cert-file"},                          // key of another certificate
		{TLSFiles{CertFile: p(DevServerFile), KeyFile: p(DevServerKey), ClientCAFile: notPEM}, "no PEM certificate"}, // CA file without a certificate
		{TLSFiles{CertFile: p(DevServerFile), KeyFile: p(DevServerKey), ClientCAFile: p("missing.pem")}, "-tls-client-ca-file"},
		{TLSFiles{ClientCAFile: p(DevCAFile)}, "needs -tls-cert-file"},
	} {
		if _, err := ServerTLSConfig(c.f); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%+v: %v, want an error with %q", c.f, err, c.want)
		}
	}
	cfg, err := ServerTLSConfig(TLSFiles{CertFile: p(DevServerFile), KeyFile: p(DevServerKey), ClientCAFile: p(DevCAFile)})
	if err != nil || cfg == nil || cfg.GetConfigForClient == nil {
		t.Fatalf("good files: %v, %+v", err, cfg)
	}
	if hs, err := cfg.GetConfigForClient(nil); err != nil || hs.ClientCAs == nil || hs.ClientAuth != tls.VerifyClientCertIfGiven || len(hs.Certificates) != 1 {
		t.Fatalf("the handshake's config: %v, %+v", err, hs)
	}
	if cfg, err := ServerTLSConfig(TLSFiles{}); cfg != nil || err != nil {
		t.Errorf("no files: %v, %v; want plaintext (nil, nil)", cfg, err)
	}
}
