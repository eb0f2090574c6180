package main

import (
	"flag"
	"io"
	"slices"
	"testing"
)

func TestParseInterspersed(t *testing.T) {
	cases := []struct {
		args []string
		pos  []string
		out  string
	}{
		{[]string{"a", "b", "--out", "d"}, []string{"a", "b"}, "d"},
		{[]string{"--out", "d", "a", "b"}, []string{"a", "b"}, "d"},
		{[]string{"a", "-out=d", "b"}, []string{"a", "b"}, "d"},
		{[]string{"a", "--", "-out", "b"}, []string{"a", "-out", "b"}, ""},
		{nil, nil, ""},
	}
	for _, tc := range cases {
		fs := flag.NewFlagSet("t", flag.ContinueOnError)
		fs.SetOutput(io.Discard)
		out := fs.String("out", "", "")
		pos, err := parseInterspersed(fs, tc.args)
		if err != nil || !slices.Equal(pos, tc.pos) || *out != tc.out {
			t.Errorf("%q: positional %q, out %q, err %v; want %q, %q", tc.args, pos, *out, err, tc.pos, tc.out)
		}
	}
}
