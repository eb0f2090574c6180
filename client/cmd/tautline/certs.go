package main

import (
	"fmt"
	"io"
	"strings"
	"time"

	"tautline/server"
)

func init() {
	register(&command{
		name:    "certs",
		summary: "make development TLS certificates (a CA, the daemon, a controller and a watcher)",
		run:     runCerts,
	})
}

const certsHelp = `
Makes a development certificate authority and, signed by it, a server
certificate for tautlined and two client certificates, all ECDSA P-256:

  ca.pem, ca-key.pem                  the CA (give ca.pem to both ends)
  server.pem, server-key.pem          tautlined's -tls-cert-file / -tls-key-file
  controller.pem, controller-key.pem  identity ` + server.DevControllerIdentity + `: may command
  watcher.pem, watcher-key.pem        identity ` + server.DevWatcherIdentity + `: may watch

Then, for example:

  tautlined -listen 0.0.0.0:7461 -cell CELL \
    -tls-cert-file DIR/server.pem -tls-key-file DIR/server-key.pem \
    -tls-client-ca-file DIR/ca.pem \
    -controller-identity ` + server.DevControllerIdentity + ` -watcher-identity ` + server.DevWatcherIdentity + `

These are for trying TLS out. Production certificates come from the site's
own PKI; this CA's key lies beside what it signed, which no real CA allows.
Existing files are kept unless -force is given.`

func runCerts(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("certs", "-out DIR [flags]", certsHelp, stderr)
	out := fs.String("out", "", "directory to write the certificates into (created if missing)")
	hosts := fs.String("hosts", "localhost,127.0.0.1,::1", "the daemon's DNS names and IP addresses, comma-separated (its certificate must name the address clients dial)")
	controller := fs.String("controller-identity", server.DevControllerIdentity, "the controller certificate's DNS subject alternative name")
	watcher := fs.String("watcher-identity", server.DevWatcherIdentity, "the watcher certificate's DNS subject alternative name")
	days := fs.Int("valid-days", 30, "validity, days")
	force := fs.Bool("force", false, "overwrite existing files")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *out == "" || fs.NArg() != 0 {
		fs.Usage()
		return fmt.Errorf("%w: give -out DIR and no arguments", errUsage)
	}
	if *days < 1 {
		return fmt.Errorf("%w: -valid-days %d: want at least 1", errUsage, *days)
	}
	var hostList []string
	for _, h := range strings.Split(*hosts, ",") {
		if h = strings.TrimSpace(h); h != "" {
			hostList = append(hostList, h)
		}
	}
	if len(hostList) == 0 {
		return fmt.Errorf("%w: -hosts names no host", errUsage)
	}
	paths, err := server.WriteDevCerts(*out, server.DevCertsOptions{
		ServerHosts:        hostList,
		ControllerIdentity: *controller,
		WatcherIdentity:    *watcher,
		Valid:              time.Duration(*days) * 24 * time.Hour,
		Overwrite:          *force,
	})
	if err != nil {
		return err
	}
	for _, p := range paths {
		fmt.Fprintln(stdout, p)
	}
	fmt.Fprintf(stdout, "development certificates, valid %d days, for %s; not for production\n", *days, strings.Join(hostList, ", "))
	return nil
}
