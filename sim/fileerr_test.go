package sim

import (
	"errors"
	"strings"
	"testing"
)

func TestJSONDocPositions(t *testing.T) {
	src := "{\n  \"a\": 1,\n  \"list\": [\n    {\"x\": 2},\n    {\"x\": 3, \"y\": [4, 5]}\n  ]\n}\n"
	d, err := newJSONDoc("f.json", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		path      string
		line, col int
	}{
		{"a", 2, 8},
		{"list[0].x", 4, 11},
		{"list[1].x", 5, 11},
		{"list[1].y[1]", 5, 23},
	}
	for _, c := range cases {
		e := d.errf(c.path, "bad")
		if e.Line != c.line || e.Col != c.col {
			t.Errorf("%s at %d:%d, want %d:%d", c.path, e.Line, e.Col, c.line, c.col)
		}
	}
	// A missing field points at its nearest parent.
	e := d.errf("list[1].z", "missing")
	if e.Line != 5 || e.Col != 5 || e.Field != "list[1].z" {
		t.Errorf("missing field: %+v", e)
	}
	if got := e.Error(); got != "f.json:5:5: list[1].z: missing" {
		t.Errorf("Error() = %q", got)
	}
}

func TestJSONDocSyntaxError(t *testing.T) {
	_, err := newJSONDoc("bad.json", []byte("{\n  \"a\": 1,\n  \"b\": ]\n}"))
	var fe *FileError
	if !errors.As(err, &fe) || fe.File != "bad.json" || fe.Line != 3 {
		t.Fatalf("want a FileError on line 3, got %v", err)
	}
}

func TestDecodeStrictUnknownField(t *testing.T) {
	src := "{\n  \"a\": 1,\n  \"colour\": 2\n}"
	d, err := newJSONDoc("u.json", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	var v struct {
		A int `json:"a"`
	}
	err = d.decodeStrict(&v)
	if err == nil || !strings.Contains(err.Error(), "colour") || !strings.Contains(err.Error(), "u.json:3") {
		t.Fatalf("want unknown field colour on line 3, got %v", err)
	}
	var v2 struct {
		A string `json:"a"`
	}
	err = d.decodeStrict(&v2)
	if err == nil || !strings.Contains(err.Error(), "u.json:2") || !strings.Contains(err.Error(), "a:") {
		t.Fatalf("want type error at a on line 2, got %v", err)
	}
}
