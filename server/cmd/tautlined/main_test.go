package main

import (
	"bytes"
	"os"
	"reflect"
	"strings"
	"testing"

	"go.uber.org/goleak"

	"tautline/server"
)

func TestMain(m *testing.M) {
	goleak.VerifyTestMain(m)
}

// TestHelpDocumentsEveryOption: -help lists a flag for every field of
// server.Config (by its JSON key), plus -config.
func TestHelpDocumentsEveryOption(t *testing.T) {
	var out bytes.Buffer
	if code := run([]string{"-help"}, func(string) string { return "" }, &out); code != 0 {
		t.Fatalf("-help exited %d", code)
	}
	help := out.String()
	typ := reflect.TypeOf(server.Config{})
	for i := 0; i < typ.NumField(); i++ {
		key := typ.Field(i).Tag.Get("json")
		name := strings.ReplaceAll(key, "_", "-")
		if name == "cells" {
			name = "cell"
		}
		if !strings.Contains(help, "  -"+name+" ") && !strings.Contains(help, "  -"+name+"\n") {
			t.Errorf("-help does not document -%s (Config.%s)", name, typ.Field(i).Name)
		}
	}
	if !strings.Contains(help, "  -config ") {
		t.Error("-help does not document -config")
	}
}

func TestBadOptionsExitWithUsageError(t *testing.T) {
	var out bytes.Buffer
	if code := run([]string{"-stall-timeout-s", "0"}, func(string) string { return "" }, &out); code != 2 {
		t.Fatalf("exit %d, want 2; output %s", code, out.String())
	}
	if !strings.Contains(out.String(), "-stall-timeout-s") || !strings.Contains(out.String(), "-cell") {
		t.Fatalf("message does not name the bad options: %s", out.String())
	}
	out.Reset()
	if code := run([]string{"-no-such-flag"}, func(string) string { return "" }, &out); code != 2 {
		t.Fatalf("unknown flag exit %d", code)
	}
}

func TestConfigFileFromEnvironment(t *testing.T) {
	dir := t.TempDir()
	path := dir + "/tautlined.json"
	if err := os.WriteFile(path, []byte(`{"cells": ["x.json"], "on_controller_loss": "hold"}`), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := loadConfig([]string{"-recover-ticks", "4"}, func(k string) string {
		switch k {
		case "TAUTLINED_CONFIG":
			return path
		case "TAUTLINED_COAST_FADE_S":
			return "0.25"
		}
		return ""
	}, &bytes.Buffer{})
	if err != nil {
		t.Fatal(err)
	}
	if cfg.OnControllerLoss != "hold" || cfg.CoastFadeS != 0.25 || cfg.RecoverTicks != 4 || cfg.Cells[0] != "x.json" {
		t.Fatalf("config %+v", cfg)
	}
}
