package main

import (
	"bytes"
	"context"
	"encoding/json"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"waymark/models"
)

// TestDeployConfigsServeDefaultSignals starts `waymark serve` with each
// config file shipped under deploy/ (the example file and the ConfigMap's)
// and asks which signals answer: those of the default blend, content and
// prior included, unless a config means otherwise. Issue 16 found both
// files setting blend(markov=1,sr=1,iknn=1,pop=0.1), which silently
// dropped catalogue content and imported priors.
func TestDeployConfigsServeDefaultSignals(t *testing.T) {
	if testing.Short() {
		t.Skip("starts the service")
	}
	// The reference: the signals of the default blend as the models
	// package builds it (models/set.go, models/set_coldstart.go).
	m, err := models.NewSet(models.DefaultSetOptions()).Get(models.DefaultBlendSpec)
	if err != nil {
		t.Fatal(err)
	}
	want := m.(*models.Blend).Signals()
	sort.Strings(want)
	if !slices.Contains(want, "content") || !slices.Contains(want, "prior") {
		t.Fatalf("the default blend %s has no content or prior signal", m.Name())
	}
	for name, b := range serveConfigs(t) {
		t.Run(name, func(t *testing.T) {
			dir := t.TempDir()
			cfg := filepath.Join(dir, "waymark.json")
			if err := os.WriteFile(cfg, b, 0o600); err != nil {
				t.Fatal(err)
			}
			addr := freeAddr(t)
			ctx, cancel := context.WithCancel(context.Background())
			done := make(chan int, 1)
			var stderr bytes.Buffer
			go func() {
				done <- run(ctx, []string{"serve", "--config", cfg, "--data", filepath.Join(dir, "data"),
					"--http", addr, "--nats-listen", "127.0.0.1:-1", "--nats", ""}, &bytes.Buffer{}, &stderr)
			}()
			defer func() {
				cancel()
				if code := <-done; code != 0 {
					t.Errorf("serve exited %d: %s", code, stderr.String())
				}
			}()
			base := "http://" + addr
			deadline := time.Now().Add(30 * time.Second)
			for {
				resp, err := http.Get(base + "/healthz")
				if err == nil {
					resp.Body.Close()
					break
				}
				if time.Now().After(deadline) {
					t.Fatalf("serve not healthy after 30 s: %v; stderr: %s", err, stderr.String())
				}
				select {
				case code := <-done:
					done <- code
					t.Fatalf("serve exited %d: %s", code, stderr.String())
				case <-time.After(50 * time.Millisecond):
				}
			}
			// An unknown candidate is scored 0 by every signal of the
			// answering blend, and each is named in its features.
			resp, err := http.Post(base+"/v1/score", "application/json", strings.NewReader(`{"items":["a"],"candidates":["b"]}`))
			if err != nil {
				t.Fatal(err)
			}
			defer resp.Body.Close()
			var res struct {
				Candidates []struct {
					Features map[string]float64 `json:"features"`
				} `json:"candidates"`
			}
			if err := json.NewDecoder(resp.Body).Decode(&res); err != nil || len(res.Candidates) != 1 {
				t.Fatalf("score: %v %+v", err, res)
			}
			var got []string
			for k := range res.Candidates[0].Features {
				got = append(got, k)
			}
			sort.Strings(got)
			if !slices.Equal(got, want) {
				t.Errorf("signals %v, want the default blend's %v", got, want)
			}
		})
	}
}

// freeAddr returns a loopback address with a port free a moment ago.
func freeAddr(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().String()
}
