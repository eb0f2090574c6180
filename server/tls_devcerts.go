package server

import (
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"fmt"
	"io/fs"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"time"
)

// DevCertsOptions says what WriteDevCerts makes. The zero value means the
// documented defaults.
type DevCertsOptions struct {
	// ServerHosts are the server certificate's DNS names and IP
	// addresses. Default: localhost, 127.0.0.1, ::1.
	ServerHosts []string
	// ControllerIdentity and WatcherIdentity are the client certificates'
	// DNS SANs, the identities an AuthzPolicy names. Defaults:
	// DevControllerIdentity and DevWatcherIdentity.
	ControllerIdentity, WatcherIdentity string
	// Valid is how long the certificates are valid. Default 30 days.
	Valid time.Duration
	// Now is the start of validity (minus a minute for clock skew).
	// Default: time.Now().
	Now time.Time
	// Overwrite replaces files that exist; without it WriteDevCerts
	// refuses to touch an existing file.
	Overwrite bool
}

// Development identities, under the .test top-level domain that RFC 2606
// reserves for testing, so they can never name a real host.
const (
	DevControllerIdentity = "controller.tautline.test"
	DevWatcherIdentity    = "watcher.tautline.test"
)

// Development certificate file names in the directory WriteDevCerts fills.
const (
	DevCAFile      = "ca.pem"
	DevCAKeyFile   = "ca-key.pem"
	DevServerFile  = "server.pem"
	DevServerKey   = "server-key.pem"
	DevControlFile = "controller.pem"
	DevControlKey  = "controller-key.pem"
	DevWatchFile   = "watcher.pem"
	DevWatchKey    = "watcher-key.pem"
)

// WriteDevCerts makes a development CA and, signed by it, a server
// certificate and two client certificates (a controller and a watcher),
// all ECDSA P-256, and writes them as PEM into dir (created if missing):
// the files named by the Dev*File constants. Keys are written readable by
// the owner only. It returns the paths written.
//
// These are for trying TLS out on one machine. Production certificates
// come from the site's own PKI; the CA key written here sits beside the
// certificates it signed, which no real CA would allow.
func WriteDevCerts(dir string, o DevCertsOptions) ([]string, error) {
	if len(o.ServerHosts) == 0 {
		o.ServerHosts = []string{"localhost", "127.0.0.1", "::1"}
	}
	if o.ControllerIdentity == "" {
		o.ControllerIdentity = DevControllerIdentity
	}
	if o.WatcherIdentity == "" {
		o.WatcherIdentity = DevWatcherIdentity
	}
	if o.Valid == 0 {
		o.Valid = 30 * 24 * time.Hour
	}
	if o.Valid < 0 {
		return nil, fmt.Errorf("validity %v is negative", o.Valid)
	}
	if o.Now.IsZero() {
		o.Now = time.Now()
	}
	names := []string{DevCAFile, DevCAKeyFile, DevServerFile, DevServerKey, DevControlFile, DevControlKey, DevWatchFile, DevWatchKey}
	if !o.Overwrite {
		for _, n := range names {
			p := filepath.Join(dir, n)
			if _, err := os.Stat(p); err == nil {
				return nil, fmt.Errorf("%s exists; remove it or ask to overwrite", p)
			} else if !errors.Is(err, fs.ErrNotExist) {
				return nil, err
			}
		}
	}

	notBefore := o.Now.Add(-time.Minute)
	notAfter := o.Now.Add(o.Valid)
	ca := &x509.Certificate{
		Subject:               pkix.Name{CommonName: "tautline development CA (not for production)"},
		NotBefore:             notBefore,
		NotAfter:              notAfter,
		KeyUsage:              x509.KeyUsageCertSign | x509.KeyUsageCRLSign,
		BasicConstraintsValid: true,
		IsCA:                  true,
		MaxPathLenZero:        true,
	}
	caKey, caDER, err := signCert(ca, nil, nil)
	if err != nil {
		return nil, err
	}
	caCert, err := x509.ParseCertificate(caDER)
	if err != nil {
		return nil, err
	}

	server := leafTemplate("tautlined (development)", notBefore, notAfter, x509.ExtKeyUsageServerAuth)
	for _, h := range o.ServerHosts {
		if ip := net.ParseIP(h); ip != nil {
			server.IPAddresses = append(server.IPAddresses, ip)
		} else {
			server.DNSNames = append(server.DNSNames, h)
		}
	}
	controller := leafTemplate("tautline controller (development)", notBefore, notAfter, x509.ExtKeyUsageClientAuth)
	controller.DNSNames = []string{o.ControllerIdentity}
	watcher := leafTemplate("tautline watcher (development)", notBefore, notAfter, x509.ExtKeyUsageClientAuth)
	watcher.DNSNames = []string{o.WatcherIdentity}

	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	var written []string
	write := func(name string, mode os.FileMode, blockType string, der []byte) error {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: blockType, Bytes: der}), mode); err != nil {
			return err
		}
		written = append(written, p)
		return os.Chmod(p, mode) // WriteFile keeps an existing file's mode
	}
	caKeyDER, err := x509.MarshalPKCS8PrivateKey(caKey)
	if err != nil {
		return nil, err
	}
	if err := write(DevCAFile, 0o644, "CERTIFICATE", caDER); err != nil {
		return written, err
	}
	if err := write(DevCAKeyFile, 0o600, "PRIVATE KEY", caKeyDER); err != nil {
		return written, err
	}
	for _, l := range []struct {
		tmpl      *x509.Certificate
		cert, key string
	}{
		{server, DevServerFile, DevServerKey},
		{controller, DevControlFile, DevControlKey},
		{watcher, DevWatchFile, DevWatchKey},
	} {
		key, der, err := signCert(l.tmpl, caCert, caKey)
		if err != nil {
			return written, err
		}
		keyDER, err := x509.MarshalPKCS8PrivateKey(key)
		if err != nil {
			return written, err
		}
		if err := write(l.cert, 0o644, "CERTIFICATE", der); err != nil {
			return written, err
		}
		if err := write(l.key, 0o600, "PRIVATE KEY", keyDER); err != nil {
			return written, err
		}
	}
	return written, nil
}

func leafTemplate(cn string, notBefore, notAfter time.Time, usage x509.ExtKeyUsage) *x509.Certificate {
	return &x509.Certificate{
		Subject:     pkix.Name{CommonName: cn},
		NotBefore:   notBefore,
		NotAfter:    notAfter,
		KeyUsage:    x509.KeyUsageDigitalSignature,
		ExtKeyUsage: []x509.ExtKeyUsage{usage},
	}
}

// signCert gives tmpl a fresh P-256 key and a random serial number and
// signs it with parentKey (self-signed when parent is nil).
func signCert(tmpl, parent *x509.Certificate, parentKey *ecdsa.PrivateKey) (*ecdsa.PrivateKey, []byte, error) {
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		return nil, nil, err
	}
	// RFC 5280 §4.1.2.2: a positive serial of at most 20 octets.
	serial, err := rand.Int(rand.Reader, new(big.Int).Lsh(big.NewInt(1), 128))
	if err != nil {
		return nil, nil, err
	}
	tmpl.SerialNumber = serial.Add(serial, big.NewInt(1))
	if parent == nil {
		parent, parentKey = tmpl, key
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, parent, &key.PublicKey, parentKey)
	if err != nil {
		return nil, nil, err
	}
	return key, der, nil
}
