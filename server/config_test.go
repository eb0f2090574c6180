package server

import (
	"flag"
	"io"
	"strings"
	"testing"
)

func TestDefaultConfigWithACellValidates(t *testing.T) {
	cfg := DefaultConfig()
	if err := cfg.Validate(); err == nil || !strings.Contains(err.Error(), "-cell") {
		t.Fatalf("defaults without a cell: %v, want a -cell complaint", err)
	}
	cfg.Cells = []string{"cell.json"}
	if err := cfg.Validate(); err != nil {
		t.Fatalf("defaults with a cell: %v", err)
	}
	if !strings.HasPrefix(cfg.Listen, "127.0.0.1:") {
		t.Fatalf("default listen %q is not loopback", cfg.Listen)
	}
}

func TestValidateNamesEachBadOption(t *testing.T) {
	cases := []struct {
		flag  string
		spoil func(c *Config)
	}{
		{"-listen", func(c *Config) { c.Listen = "nonsense" }},
		{"-listen", func(c *Config) { c.Listen = "0.0.0.0:7461" }},
		{"-listen", func(c *Config) { c.Listen = "127.0.0.1:99999" }},
		{"-tls-cert-file", func(c *Config) { c.TLSCertFile = "cert.pem" }},
		{"-cell", func(c *Config) { c.Cells = []string{"a.json", "a.json"} }},
		{"-capture-dir", func(c *Config) { c.CaptureDir = "" }},
		{"-stall-timeout-s", func(c *Config) { c.StallTimeoutS = 0 }},
		{"-coast-fade-s", func(c *Config) { c.CoastFadeS = -1 }},
		{"-max-latency-s", func(c *Config) { c.MaxLatencyS = 5 }},
		{"-log-format", func(c *Config) { c.LogFormat = "xml" }},
		{"-log-level", func(c *Config) { c.LogLevel = "loud" }},
		{"-on-controller-loss", func(c *Config) { c.OnControllerLoss = "panic" }},
		{"-send-queue-ticks", func(c *Config) { c.SendQueueTicks = 0 }},
		{"-bad-ticks-to-coast", func(c *Config) { c.BadTicksToCoast = 0 }},
		{"-recover-ticks", func(c *Config) { c.RecoverTicks = -2 }},
		{"-capture-max-file-bytes", func(c *Config) { c.CaptureMaxFileBytes = -1 }},
		{"-start-tolerance-rad", func(c *Config) { c.StartToleranceRad = 0 }},
	}
	for _, tc := range cases {
		cfg := DefaultConfig()
		cfg.Cells = []string{"cell.json"}
		tc.spoil(&cfg)
		err := cfg.Validate()
		if err == nil || !strings.Contains(err.Error(), tc.flag+":") {
			t.Errorf("%s: Validate said %v", tc.flag, err)
		}
	}
	// Non-loopback with full TLS is allowed.
	cfg := DefaultConfig()
	cfg.Cells = []string{"cell.json"}
	cfg.Listen = "0.0.0.0:7461"
	cfg.TLSCertFile, cfg.TLSKeyFile, cfg.TLSClientCAFile = "c.pem", "k.pem", "ca.pem"
	cfg.ControllerIdentities = []string{"controller.example"}
	if err := cfg.Validate(); err != nil {
		t.Fatalf("non-loopback with TLS: %v", err)
	}
}

func TestConfigPrecedenceFileThenEnvThenFlags(t *testing.T) {
	cfg := DefaultConfig()
	file := `{"cells": ["a.json", "b.json"], "stall_timeout_s": 0.5, "log_format": "console", "recover_ticks": 3}`
	if err := cfg.ParseConfig("tautlined.json", []byte(file)); err != nil {
		t.Fatal(err)
	}
	env := map[string]string{"TAUTLINED_STALL_TIMEOUT_S": "0.75", "TAUTLINED_NO_CORRECTION": "true"}
	if err := cfg.ApplyEnv(func(k string) string { return env[k] }); err != nil {
		t.Fatal(err)
	}
	fs := flag.NewFlagSet("t", flag.ContinueOnError)
	cfg.BindFlags(fs)
	if err := fs.Parse([]string{"-cell", "c.json", "-recover-ticks", "7"}); err != nil {
		t.Fatal(err)
	}
	switch {
	case strings.Join(cfg.Cells, ",") != "c.json":
		t.Errorf("cells %v: the flag replaces the file's list", cfg.Cells)
	case cfg.StallTimeoutS != 0.75:
		t.Errorf("stall timeout %v: the environment overrides the file", cfg.StallTimeoutS)
	case cfg.RecoverTicks != 7:
		t.Errorf("recover ticks %d: the flag overrides the file", cfg.RecoverTicks)
	case cfg.LogFormat != "console" || !cfg.NoCorrection:
		t.Errorf("file or environment value lost: %+v", cfg)
	}
}

func TestConfigFileErrorsNamePosition(t *testing.T) {
	cfg := DefaultConfig()
	err := cfg.ParseConfig("tautlined.json", []byte("{\n  \"listen\": \"127.0.0.1:1\",\n  \"stal_timeout_s\": 1\n}"))
	if err == nil || !strings.HasPrefix(err.Error(), "tautlined.json:3:") || !strings.Contains(err.Error(), "stal_timeout_s") {
		t.Fatalf("unknown key: %v", err)
	}
	err = cfg.ParseConfig("tautlined.json", []byte("{\n  \"recover_ticks\": \"ten\"\n}"))
	if err == nil || !strings.HasPrefix(err.Error(), "tautlined.json:2:") {
		t.Fatalf("wrong type: %v", err)
	}
	err = cfg.ApplyEnv(func(k string) string {
		if k == "TAUTLINED_SEND_QUEUE_TICKS" {
			return "many"
		}
		return ""
	})
	if err == nil || !strings.Contains(err.Error(), "TAUTLINED_SEND_QUEUE_TICKS") {
		t.Fatalf("bad environment value: %v", err)
	}
}

func TestEveryOptionHasAFlagAndHelp(t *testing.T) {
	cfg := DefaultConfig()
	fs := flag.NewFlagSet("t", flag.ContinueOnError)
	fs.SetOutput(io.Discard)
	cfg.BindFlags(fs)
	n := 0
	fs.VisitAll(func(f *flag.Flag) {
		n++
		if f.Usage == "" || !strings.Contains(f.Usage, EnvName(f.Name)) {
			t.Errorf("flag -%s: usage %q lacks help or its environment variable", f.Name, f.Usage)
		}
	})
	if want := len(cfg.options()); n != want {
		t.Fatalf("%d flags for %d options", n, want)
	}
}
