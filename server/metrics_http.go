package server

import (
	"net/http"
	"time"

	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// DefaultMetricsListen is where tautlined serves metrics unless told
// otherwise: loopback, a port beside the gRPC one. Metrics say nothing
// that commands a cell, but they do describe the plant; expose them
// beyond the machine deliberately (a scraper on the same host, or a
// network policy in Kubernetes).
const DefaultMetricsListen = "127.0.0.1:7462"

// MetricsPath is the HTTP path the metrics are served at.
const MetricsPath = "/metrics"

// NewMetricsHTTPServer returns an HTTP server for the metrics listener: m's
// registry in the Prometheus exposition format at MetricsPath, 404
// elsewhere. The caller runs it with Serve on its own listener and stops
// it with Shutdown. Timeouts keep a slow or idle client from holding a
// connection open for long.
func NewMetricsHTTPServer(m *Metrics) *http.Server {
	mux := http.NewServeMux()
	mux.Handle(MetricsPath, m.Handler())
	return &http.Server{
		Handler:           mux,
		ReadHeaderTimeout: 5 * time.Second,
		ReadTimeout:       10 * time.Second,
		WriteTimeout:      30 * time.Second,
		IdleTimeout:       60 * time.Second,
	}
}

// Handler serves m's registry. Errors while gathering are logged in the
// response and the rest is still served (promhttp.ContinueOnError), so one
// bad collector never hides the tick metrics.
func (m *Metrics) Handler() http.Handler {
	return promhttp.HandlerFor(m.Registry, promhttp.HandlerOpts{ErrorHandling: promhttp.ContinueOnError})
}
