package client

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"

	pb "tautline/proto/tautline/v1"
)

// testPKI writes a CA, a server certificate for 127.0.0.1 and a client
// certificate (all invented, made here) as PEM files in dir.
func testPKI(t *testing.T, dir string) (caPool *x509.CertPool, server tls.Certificate) {
	t.Helper()
	newKey := func() *ecdsa.PrivateKey {
		k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
		if err != nil {
			t.Fatal(err)
		}
		return k
	}
	write := func(name, typ string, der []byte) {
		if err := os.WriteFile(filepath.Join(dir, name), pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	now := time.Now()
	caKey := newKey()
	caTmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "test CA"}, NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour),
		IsCA: true, BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign}
	caDER, err := x509.CreateCertificate(rand.Reader, caTmpl, caTmpl, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	ca, _ := x509.ParseCertificate(caDER)
	write("ca.pem", "CERTIFICATE", caDER)
	issue := func(serial int64, usage x509.ExtKeyUsage, certFile, keyFile string) tls.Certificate {
		k := newKey()
		tmpl := &x509.Certificate{SerialNumber: big.NewInt(serial), Subject: pkix.Name{CommonName: certFile}, NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour),
			ExtKeyUsage: []x509.ExtKeyUsage{usage}, KeyUsage: x509.KeyUsageDigitalSignature, IPAddresses: []net.IP{net.IPv4(127, 0, 0, 1)}}
		der, err := x509.CreateCertificate(rand.Reader, tmpl, ca, &k.PublicKey, caKey)
		if err != nil {
			t.Fatal(err)
		}
		kder, _ := x509.MarshalECPrivateKey(k)
		write(certFile, "CERTIFICATE", der)
		write(keyFile, "EC PRIVATE KEY", kder)
		return tls.Certificate{Certificate: [][]byte{der}, PrivateKey: k}
	}
	server = issue(2, x509.ExtKeyUsageServerAuth, "server.pem", "server.key")
	issue(3, x509.ExtKeyUsageClientAuth, "client.pem", "client.key")
	caPool = x509.NewCertPool()
	caPool.AddCert(ca)
	return caPool, server
}

// A daemon that requires client certificates is reached with DialSettings;
// without a client certificate the call fails.
func TestDialWithTLSClientCertificates(t *testing.T) {
	dir := t.TempDir()
	pool, serverCert := testPKI(t, dir)
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	srv := grpc.NewServer(grpc.Creds(credentials.NewTLS(&tls.Config{
		Certificates: []tls.Certificate{serverCert}, ClientAuth: tls.RequireAndVerifyClientCert, ClientCAs: pool, MinVersion: tls.VersionTLS13,
	})))
	pb.RegisterCellControlServer(srv, &refusingDaemon{code: codes.NotFound})
	go srv.Serve(lis)
	defer srv.Stop()

	f := func(name string) string { return filepath.Join(dir, name) }
	c, err := Dial(lis.Addr().String(), DialSettings{CAFile: f("ca.pem"), CertFile: f("client.pem"), KeyFile: f("client.key")})
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	// The fake daemon refuses with NOT_FOUND: reaching it is the point.
	if _, err := c.ArmCue(context.Background(), "cell", "show"); !errors.Is(err, ErrNotFound) {
		t.Errorf("with a client certificate: got %v, want the daemon's ErrNotFound", err)
	}

	anon, err := Dial(lis.Addr().String(), DialSettings{CAFile: f("ca.pem")})
	if err != nil {
		t.Fatal(err)
	}
	defer anon.Close()
	if _, err := anon.ArmCue(context.Background(), "cell", "show"); err == nil || errors.Is(err, ErrNotFound) {
		t.Errorf("without a client certificate: got %v, want the handshake refused", err)
	}

	for _, bad := range []DialSettings{
		{CAFile: f("missing.pem")},
		{CAFile: f("client.key")}, // not a certificate
		{CAFile: f("ca.pem"), CertFile: f("client.pem")},
	} {
		if _, err := Dial(lis.Addr().String(), bad); err == nil {
			t.Errorf("Dial accepted %+v", bad)
		}
	}
}
