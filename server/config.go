package server

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"net"
	"os"
	"strconv"
	"strings"
	"time"
)

// Config is everything tautlined is told. DefaultConfig fills in the
// defaults; a config file (LoadConfigFile), the environment (ApplyEnv) and
// flags (BindFlags) override them in that order; Validate says what is
// wrong in words an operator can act on.
//
// Times are in seconds (float) and say so in their names, as everywhere in
// tautline.
type Config struct {
	// Listen is the address to serve on, host:port. Loopback by default;
	// any other host needs TLS with client certificates.
	Listen string `json:"listen"`
	// Cells are the cell files (tautline.cell/1) to serve, one cell each.
	Cells []string `json:"cells"`
	// CaptureDir is where every session's capture is written. Created if
	// missing.
	CaptureDir string `json:"capture_dir"`
	// CaptureFlushIntervalS is how often captures are fsynced, s.
	CaptureFlushIntervalS float64 `json:"capture_flush_interval_s"`
	// CaptureMaxFileBytes splits a capture into parts of about this size;
	// 0 keeps one file.
	CaptureMaxFileBytes int64 `json:"capture_max_file_bytes"`

	// LogFormat is "json" (default) or "console" (for people).
	LogFormat string `json:"log_format"`
	// LogLevel is debug, info, warn or error.
	LogLevel string `json:"log_level"`
	// DebugEveryTicks logs one tick in this many at debug level.
	DebugEveryTicks int `json:"debug_every_ticks"`
	// SlowTickS: a tick whose compute takes longer is logged at warn, s.
	SlowTickS float64 `json:"slow_tick_s"`
	// SlowCallS: a unary call that takes longer is logged at warn, s.
	SlowCallS float64 `json:"slow_call_s"`

	// StallTimeoutS: a controller stream with no observation for this long
	// is ended and the cell goes to OnControllerLoss, s.
	StallTimeoutS float64 `json:"stall_timeout_s"`
	// OnControllerLoss is what a live cell does when its controller stream
	// stalls, drops or reads too slowly: "coast" or "hold".
	OnControllerLoss string `json:"on_controller_loss"`
	// SendQueueTicks is how many commands may wait for a slow controller
	// before its stream is ended.
	SendQueueTicks int `json:"send_queue_ticks"`
	// BadTicksToCoast: this many rejected or failed ticks in a row send a
	// live cell to coast.
	BadTicksToCoast int `json:"bad_ticks_to_coast"`
	// RecoverTicks: this many usable ticks in a row bring a coasting cell
	// back to live.
	RecoverTicks int `json:"recover_ticks"`
	// CoastFadeS is the time over which the last correction fades out in
	// coast, s.
	CoastFadeS float64 `json:"coast_fade_s"`
	// MaxLatencyS: an observation whose markers were captured more than
	// this before its cue time is answered as late, s.
	MaxLatencyS float64 `json:"max_latency_s"`
	// PrepareBudgetS bounds the planner's prepare phase per tick, s.
	PrepareBudgetS float64 `json:"prepare_budget_s"`
	// PrepareDelayS is how long the tick path pauses after a command is
	// handed to the transport before it runs the next prepare phase, so
	// the command is written before the prepare takes a core, s. 0: no
	// pause.
	PrepareDelayS float64 `json:"prepare_delay_s"`
	// StartToleranceRad: Start needs the last command within this of the
	// cue's first pose on every joint (rad, or m for prismatic joints).
	StartToleranceRad float64 `json:"start_tolerance_rad"`
	// ReseedToleranceRad: a new controller stream whose first measured
	// joints are further than this from the last command sent restarts the
	// guard's history at the measured joints (rad or m).
	ReseedToleranceRad float64 `json:"reseed_tolerance_rad"`
	// NoCorrection plays cues open-loop (nominal through the guard), for
	// comparison runs; the planner is not built.
	NoCorrection bool `json:"no_correction"`
	// WatchMinIntervalS is WatchStatus's default least interval between
	// updates that are not state changes, s.
	WatchMinIntervalS float64 `json:"watch_min_interval_s"`
	// MetricsListen is where Prometheus metrics are served over HTTP at
	// /metrics, host:port; empty: not served (the daemon still keeps them,
	// see Server.Metrics).
	MetricsListen string `json:"metrics_listen"`
	// ShutdownGraceS is how long a graceful stop may take before the
	// server stops hard, s.
	ShutdownGraceS float64 `json:"shutdown_grace_s"`

	// TLSCertFile and TLSKeyFile are the server's certificate and key
	// (PEM), both or neither; TLSClientCAFile the CA that client
	// certificates must chain to (mutual TLS, with ControllerIdentities).
	// A non-loopback Listen needs TLS unless InsecureListen is set (see
	// CheckSecurityConfig).
	TLSCertFile     string `json:"tls_cert_file"`
	TLSKeyFile      string `json:"tls_key_file"`
	TLSClientCAFile string `json:"tls_client_ca_file"`
	// InsecureListen allows a non-loopback Listen without TLS; the daemon
	// logs a warning on every start.
	InsecureListen bool `json:"insecure_listen"`
	// ControllerIdentities are the client certificate identities (URI or
	// DNS subject alternative names) that may command: Drive, LoadCue,
	// ArmCue, Start, Stop, ResetFault. WatcherIdentities may read status
	// and list cues ("*": any client whose certificate verifies). Both
	// need TLSClientCAFile. See AuthzPolicy.
	ControllerIdentities []string `json:"controller_identity"`
	WatcherIdentities    []string `json:"watcher_identity"`
	// ProbeListen serves the health service alone, in plaintext, for
	// orchestrators' gRPC probes (which cannot speak TLS), host:port;
	// empty (the default) turns it off.
	ProbeListen string `json:"probe_listen"`
}

// DefaultListen is where tautlined listens unless told otherwise.
const DefaultListen = "127.0.0.1:7461"

// DefaultConfig returns the defaults. Cells is empty: the operator names
// the cells to serve.
func DefaultConfig() Config {
	return Config{
		Listen:                DefaultListen,
		CaptureDir:            "captures",
		CaptureFlushIntervalS: 0.1,
		LogFormat:             "json",
		LogLevel:              "info",
		DebugEveryTicks:       100,
		SlowTickS:             0.004,
		SlowCallS:             0.1,
		StallTimeoutS:         0.25,
		OnControllerLoss:      "coast",
		SendQueueTicks:        32,
		BadTicksToCoast:       5,
		RecoverTicks:          10,
		CoastFadeS:            0.5,
		MaxLatencyS:           0.2,
		PrepareBudgetS:        0.003,
		PrepareDelayS:         0.0005,
		StartToleranceRad:     0.01,
		ReseedToleranceRad:    0.05,
		WatchMinIntervalS:     0.1,
		ShutdownGraceS:        5,
		MetricsListen:         DefaultMetricsListen,
		ProbeListen:           DefaultProbeListen,
	}
}

// option ties one Config field to its flag, environment variable and help.
// The JSON key is the flag name with '-' replaced by '_', the environment
// variable TAUTLINED_ and the key in upper case.
type option struct {
	name string
	help string
	ptr  any // *string, *[]string, *float64, *int, *int64 or *bool
}

func (c *Config) options() []option {
	return []option{
		{"listen", "address to serve on, host:port (non-loopback hosts need the tls-* options)", &c.Listen},
		{"cell", "cell file to serve (repeat the flag, or comma-separate in the environment, for several cells)", &c.Cells},
		{"capture-dir", "directory for session captures (created if missing)", &c.CaptureDir},
		{"capture-flush-interval-s", "fsync captures this often, s", &c.CaptureFlushIntervalS},
		{"capture-max-file-bytes", "split captures into parts of about this many bytes (0: one file)", &c.CaptureMaxFileBytes},
		{"log-format", "log format: json or console", &c.LogFormat},
		{"log-level", "log level: debug, info, warn or error", &c.LogLevel},
		{"debug-every-ticks", "log one tick in this many at debug level", &c.DebugEveryTicks},
		{"slow-tick-s", "log ticks whose compute takes longer than this at warn, s", &c.SlowTickS},
		{"slow-call-s", "log calls that take longer than this at warn, s", &c.SlowCallS},
		{"stall-timeout-s", "end a controller stream silent for this long, s", &c.StallTimeoutS},
		{"on-controller-loss", "what a live cell does when its controller stalls, drops or reads too slowly: coast or hold", &c.OnControllerLoss},
		{"send-queue-ticks", "commands that may wait for a slow controller before its stream is ended", &c.SendQueueTicks},
		{"bad-ticks-to-coast", "rejected or failed ticks in a row that send a live cell to coast", &c.BadTicksToCoast},
		{"recover-ticks", "usable ticks in a row that bring a coasting cell back to live", &c.RecoverTicks},
		{"coast-fade-s", "time over which the last correction fades out in coast, s", &c.CoastFadeS},
		{"max-latency-s", "largest cue_time_s - capture_time_s accepted, s", &c.MaxLatencyS},
		{"prepare-budget-s", "time the planner's prepare phase may take per tick, s", &c.PrepareBudgetS},
		{"prepare-delay-s", "pause after a command goes out before the next prepare phase, so it is written first, s (0: none)", &c.PrepareDelayS},
		{"start-tolerance-rad", "Start needs the arms this close to the cue's first pose, rad (m for prismatic joints)", &c.StartToleranceRad},
		{"reseed-tolerance-rad", "a new controller stream further than this from the last command restarts the guard's history, rad (m)", &c.ReseedToleranceRad},
		{"no-correction", "play cues open-loop (nominal through the guard), for comparison runs", &c.NoCorrection},
		{"watch-min-interval-s", "default least interval between status updates that are not state changes, s", &c.WatchMinIntervalS},
		{"metrics-listen", "serve Prometheus metrics over HTTP at /metrics on this host:port (empty: off)", &c.MetricsListen},
		{"shutdown-grace-s", "time a graceful stop may take before the server stops hard, s", &c.ShutdownGraceS},
		{"tls-cert-file", "server certificate (PEM)", &c.TLSCertFile},
		{"tls-key-file", "server private key (PEM)", &c.TLSKeyFile},
		{"tls-client-ca-file", "CA bundle (PEM) that client certificates must chain to; turns on mutual TLS and authorisation by -controller-identity and -watcher-identity", &c.TLSClientCAFile},
		{"insecure-listen", "allow a non-loopback -listen without TLS (anyone who reaches the port can command the arms; logged at warn)", &c.InsecureListen},
		{"controller-identity", "client certificate identity (URI or DNS subject alternative name) that may command the cell; repeat the flag, or comma-separate in the environment, for several", &c.ControllerIdentities},
		{"watcher-identity", "client certificate identity that may watch status and list cues (* for any client whose certificate verifies); repeatable like -controller-identity", &c.WatcherIdentities},
		{"probe-listen", "address for a plaintext, health-only gRPC listener for orchestrator probes, host:port (empty: off)", &c.ProbeListen},
	}
}

// EnvName is the environment variable that overrides the option named by
// flag name: "stall-timeout-s" is TAUTLINED_STALL_TIMEOUT_S.
func EnvName(flagName string) string {
	return "TAUTLINED_" + strings.ToUpper(strings.ReplaceAll(flagName, "-", "_"))
}

// BindFlags defines one flag per option on fs, writing into c. A flag's
// default is c's value when BindFlags is called. The repeated -cell flag
// replaces the configured list with the cells it names.
func (c *Config) BindFlags(fs *flag.FlagSet) {
	for _, o := range c.options() {
		help := fmt.Sprintf("%s (env %s)", o.help, EnvName(o.name))
		switch p := o.ptr.(type) {
		case *string:
			fs.StringVar(p, o.name, *p, help)
		case *[]string:
			fs.Var(&listFlag{dst: p}, o.name, help)
		case *float64:
			fs.Float64Var(p, o.name, *p, help)
		case *int:
			fs.IntVar(p, o.name, *p, help)
		case *int64:
			fs.Int64Var(p, o.name, *p, help)
		case *bool:
			fs.BoolVar(p, o.name, *p, help)
		default:
			panic(fmt.Sprintf("server: option %s has type %T", o.name, o.ptr))
		}
	}
}

// listFlag is a repeatable flag: the first Set replaces the list, later
// ones append.
type listFlag struct {
	dst *[]string
	set bool
}

func (f *listFlag) String() string {
	if f == nil || f.dst == nil {
		return ""
	}
	return strings.Join(*f.dst, ",")
}

func (f *listFlag) Set(v string) error {
	if !f.set {
		*f.dst = nil
		f.set = true
	}
	*f.dst = append(*f.dst, v)
	return nil
}

// ApplyEnv overrides options from TAUTLINED_* variables read with getenv
// (os.Getenv in the daemon). An empty variable is ignored. A value that
// does not parse is an error naming the variable.
func (c *Config) ApplyEnv(getenv func(string) string) error {
	var errs []error
	for _, o := range c.options() {
		name := EnvName(o.name)
		v := getenv(name)
		if v == "" {
			continue
		}
		if err := setOption(o.ptr, v); err != nil {
			errs = append(errs, fmt.Errorf("environment %s=%q: %w", name, v, err))
		}
	}
	return errors.Join(errs...)
}

func setOption(ptr any, v string) error {
	switch p := ptr.(type) {
	case *string:
		*p = v
	case *[]string:
		*p = nil
		for _, s := range strings.Split(v, ",") {
			if s = strings.TrimSpace(s); s != "" {
				*p = append(*p, s)
			}
		}
	case *float64:
		f, err := strconv.ParseFloat(v, 64)
		if err != nil {
			return fmt.Errorf("want a number")
		}
		*p = f
	case *int:
		n, err := strconv.Atoi(v)
		if err != nil {
			return fmt.Errorf("want a whole number")
		}
		*p = n
	case *int64:
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil {
			return fmt.Errorf("want a whole number")
		}
		*p = n
	case *bool:
		b, err := strconv.ParseBool(v)
		if err != nil {
			return fmt.Errorf("want true or false")
		}
		*p = b
	}
	return nil
}

// LoadConfigFile merges the JSON config file at path into c: keys present
// in the file replace c's values, the rest stay. Unknown keys are errors,
// with the file, line and column.
func (c *Config) LoadConfigFile(path string) error {
	data, err := os.ReadFile(path)
	if err != nil {
		return fmt.Errorf("config file: %w", err)
	}
	return c.ParseConfig(path, data)
}

// ParseConfig is LoadConfigFile on bytes already read; path is only used in
// messages.
func (c *Config) ParseConfig(path string, data []byte) error {
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(c); err != nil {
		var off int64 = -1
		var syn *json.SyntaxError
		var typ *json.UnmarshalTypeError
		switch {
		case errors.As(err, &syn):
			off = syn.Offset
		case errors.As(err, &typ):
			off = typ.Offset
		default:
			off = dec.InputOffset()
			if name, ok := strings.CutPrefix(err.Error(), "json: unknown field "); ok {
				if i := bytes.Index(data, []byte(name)); i >= 0 {
					off = int64(i)
				}
			}
		}
		line, col := lineColumn(data, off)
		return fmt.Errorf("%s:%d:%d: %v", path, line, col, strings.TrimPrefix(err.Error(), "json: "))
	}
	if dec.More() {
		off := dec.InputOffset()
		line, col := lineColumn(data, off)
		return fmt.Errorf("%s:%d:%d: text after the config object", path, line, col)
	}
	return nil
}

func lineColumn(data []byte, off int64) (line, col int) {
	if off < 0 || off > int64(len(data)) {
		off = int64(len(data))
	}
	line, col = 1, 1
	for _, b := range data[:off] {
		if b == '\n' {
			line++
			col = 1
		} else {
			col++
		}
	}
	return line, col
}

// Validate checks every option and returns all problems at once, each
// naming its option by flag name.
func (c *Config) Validate() error {
	var errs []error
	bad := func(name, format string, args ...any) {
		errs = append(errs, fmt.Errorf("-%s: %s", name, fmt.Sprintf(format, args...)))
	}
	_, port, err := net.SplitHostPort(c.Listen)
	if err != nil {
		bad("listen", "%q is not host:port (%v)", c.Listen, err)
	} else {
		if _, err := strconv.ParseUint(port, 10, 16); err != nil {
			bad("listen", "port %q is not a number from 0 to 65535", port)
		}
	}
	if err := CheckSecurityConfig(c.Security()); err != nil {
		errs = append(errs, err)
	}
	if c.ProbeListen != "" {
		if _, _, err := net.SplitHostPort(c.ProbeListen); err != nil {
			bad("probe-listen", "%q is not host:port (%v)", c.ProbeListen, err)
		} else if c.ProbeListen == c.Listen || c.ProbeListen == c.MetricsListen {
			bad("probe-listen", "%q is also -listen or -metrics-listen; give it its own port", c.ProbeListen)
		}
	}
	if len(c.Cells) == 0 {
		bad("cell", "no cell to serve; name at least one cell file")
	}
	seen := map[string]bool{}
	for _, p := range c.Cells {
		if p == "" {
			bad("cell", "empty cell file name")
		} else if seen[p] {
			bad("cell", "%s is named twice", p)
		}
		seen[p] = true
	}
	if c.MetricsListen != "" {
		if _, _, err := net.SplitHostPort(c.MetricsListen); err != nil {
			bad("metrics-listen", "%q is not host:port (%v)", c.MetricsListen, err)
		}
	}
	if c.CaptureDir == "" {
		bad("capture-dir", "empty; every session is recorded, so name a directory")
	}
	positive := func(name string, v float64) {
		if !(v > 0) || math.IsInf(v, 0) {
			bad(name, "%v s must be positive and finite", v)
		}
	}
	positive("capture-flush-interval-s", c.CaptureFlushIntervalS)
	positive("slow-tick-s", c.SlowTickS)
	positive("slow-call-s", c.SlowCallS)
	positive("stall-timeout-s", c.StallTimeoutS)
	positive("coast-fade-s", c.CoastFadeS)
	positive("max-latency-s", c.MaxLatencyS)
	if c.MaxLatencyS > 1 {
		bad("max-latency-s", "%v s is more than 1 s; markers that old cannot steer a figure (and predicting across them costs a model step per tick)", c.MaxLatencyS)
	}
	positive("prepare-budget-s", c.PrepareBudgetS)
	positive("watch-min-interval-s", c.WatchMinIntervalS)
	positive("shutdown-grace-s", c.ShutdownGraceS)
	if !(c.PrepareDelayS >= 0) || c.PrepareDelayS > 0.01 {
		bad("prepare-delay-s", "%v s must be from 0 to 0.01", c.PrepareDelayS)
	}
	if !(c.StartToleranceRad > 0) || math.IsInf(c.StartToleranceRad, 0) {
		bad("start-tolerance-rad", "%v must be positive and finite", c.StartToleranceRad)
	}
	if !(c.ReseedToleranceRad > 0) || math.IsInf(c.ReseedToleranceRad, 0) {
		bad("reseed-tolerance-rad", "%v must be positive and finite", c.ReseedToleranceRad)
	}
	if c.CaptureMaxFileBytes < 0 {
		bad("capture-max-file-bytes", "%d must be 0 (one file) or more", c.CaptureMaxFileBytes)
	}
	switch c.LogFormat {
	case "json", "console":
	default:
		bad("log-format", "%q: want json or console", c.LogFormat)
	}
	switch c.LogLevel {
	case "debug", "info", "warn", "error":
	default:
		bad("log-level", "%q: want debug, info, warn or error", c.LogLevel)
	}
	switch c.OnControllerLoss {
	case "coast", "hold":
	default:
		bad("on-controller-loss", "%q: want coast or hold", c.OnControllerLoss)
	}
	if c.DebugEveryTicks < 1 {
		bad("debug-every-ticks", "%d must be at least 1", c.DebugEveryTicks)
	}
	if c.SendQueueTicks < 1 {
		bad("send-queue-ticks", "%d must be at least 1", c.SendQueueTicks)
	}
	if c.BadTicksToCoast < 1 {
		bad("bad-ticks-to-coast", "%d must be at least 1", c.BadTicksToCoast)
	}
	if c.RecoverTicks < 1 {
		bad("recover-ticks", "%d must be at least 1", c.RecoverTicks)
	}
	return errors.Join(errs...)
}

// Security is the part of c that NewSecurity and CheckSecurityConfig take.
func (c *Config) Security() SecurityConfig {
	return SecurityConfig{
		Listen:         c.Listen,
		TLS:            TLSFiles{CertFile: c.TLSCertFile, KeyFile: c.TLSKeyFile, ClientCAFile: c.TLSClientCAFile},
		InsecureListen: c.InsecureListen,
		Authz:          AuthzPolicy{Controllers: c.ControllerIdentities, Watchers: c.WatcherIdentities},
	}
}

// Seconds converts a float number of seconds to a time.Duration.
func Seconds(s float64) time.Duration { return time.Duration(s * float64(time.Second)) }

func seconds(s float64) time.Duration { return Seconds(s) }
