package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestPriorsImportRefusesBeforeConnecting: priors import checks its flags
// and the whole file before it connects to the bus, so a bad import
// publishes nothing (issue 12: an empty file, an unknown model and
// --weight 2000 were taken without complaint). --nats points at a port
// nothing listens on: reaching the bus would fail with a connection error,
// not the messages wanted here.
func TestPriorsImportRefusesBeforeConnecting(t *testing.T) {
	dir := t.TempDir()
	file := func(name, content string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	const hdr = `{"format":"waymark-priors","version":1}` + "\n"
	const row = `{"model":"iknn","item":"A","neighbors":[{"item":"B","weight":1}]}` + "\n"
	good := file("good.jsonl", hdr+row)
	tests := []struct {
		name string
		args []string
		code int
		want string
	}{
		{"weight 2000", []string{"--weight", "2000", good}, 2, "at most 1"},
		{"weight 0", []string{"--weight", "0", good}, 2, "more than 0"},
		{"unknown model", []string{"--models", "iknn,bogus", good}, 2, `unknown model "bogus"`},
		{"empty file", []string{file("empty.jsonl", "")}, 1, "empty"},
		{"unknown row model", []string{file("pop.jsonl", hdr+`{"model":"pop","item":"A","neighbors":[{"item":"B","weight":1}]}`+"\n")}, 1, `model "pop"`},
		{"bad last line", []string{file("tail.jsonl", hdr+row+"{not json\n")}, 1, "line 3"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			var stdout, stderr bytes.Buffer
			args := append([]string{"import", "--nats", "nats://127.0.0.1:1"}, tt.args...)
			code := runPriors(context.Background(), args, &stdout, &stderr)
			if code != tt.code || !strings.Contains(stderr.String(), tt.want) {
				t.Fatalf("exit %d, want %d with %q; stderr: %s", code, tt.code, tt.want, stderr.String())
			}
		})
	}
}
