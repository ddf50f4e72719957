package main

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"fmt"
	"io"
	"log/slog"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"

	"waymark/session"
	"waymark/stream"
)

// TestMain keeps the user's config folder, where embedded servers record
// their bus credentials (stream.DefaultCredentialsDir), out of the real
// home for every test of this package.
func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "waymark-cmd-home-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	os.Setenv("XDG_CONFIG_HOME", dir)
	os.Setenv("HOME", dir)
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}

// isolateConfig gives the test its own user config folder.
func isolateConfig(t *testing.T) {
	t.Helper()
	d := t.TempDir()
	t.Setenv("XDG_CONFIG_HOME", d)
	t.Setenv("HOME", d)
}

// authServer starts an embedded server with credentials, recording them in
// the (test's) user config folder as serve does.
func authServer(t *testing.T, a stream.ServerAuth) *stream.Server {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	s, err := stream.StartServer(ctx, stream.ServerOptions{Dir: t.TempDir(), Listen: "127.0.0.1:-1", Auth: &a})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = s.Shutdown(context.Background()) })
	return s
}

// lastSeq reads the events stream's last sequence with the server's own
// full credentials.
func lastSeq(t *testing.T, s *stream.Server) uint64 {
	t.Helper()
	o := s.ClientOptions(stream.DefaultBusOptions())
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	b, err := stream.Connect(ctx, o)
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	if err := b.CreateStreams(ctx); err != nil {
		t.Fatal(err)
	}
	n, err := b.LastSequence(ctx)
	if err != nil {
		t.Fatal(err)
	}
	return n
}

func writeEvents(t *testing.T, n int) string {
	t.Helper()
	var b strings.Builder
	for i := range n {
		fmt.Fprintf(&b, `{"session":"v-%d","item":"tent-%d","ts":%d}`+"\n", i/3, i%5, 1767225600000+int64(i)*1000)
	}
	p := filepath.Join(t.TempDir(), "events.ndjson")
	if err := os.WriteFile(p, []byte(b.String()), 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

func runCmd(run func(context.Context, []string, io.Writer, io.Writer) int, args ...string) (int, string) {
	var out bytes.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	code := run(ctx, args, &out, &out)
	return code, out.String()
}

// TestSendFindsRecordedCredentials: send and replay given only --nats find the
// credentials the embedded server recorded in the user's config folder
// for that address; with another config folder it is refused.
func TestSendFindsRecordedCredentials(t *testing.T) {
	isolateConfig(t)
	s := authServer(t, stream.ServerAuth{CredentialsDir: stream.DefaultCredentialsDir()})
	ev := writeEvents(t, 30)
	if code, out := runCmd(runSend, "--nats", s.ClientURL(), ev); code != 0 {
		t.Fatalf("send with recorded credentials: exit %d: %s", code, out)
	}
	if got := lastSeq(t, s); got != 30 {
		t.Fatalf("stream last sequence %d after sending 30 events", got)
	}
	// replay reads the range through an ordered consumer whose replies
	// come to the recorded credentials' inbox prefix.
	rep := filepath.Join(t.TempDir(), "r.json")
	if code, out := runCmd(runReplay, "--nats", s.ClientURL(), "--quiet", "--json", rep); code != 0 {
		t.Fatalf("replay with recorded credentials: exit %d: %s", code, out)
	}
	if b, err := os.ReadFile(rep); err != nil || !strings.Contains(string(b), `"events": 30`) {
		t.Fatalf("replay report does not count the 30 events sent (%v): %.300s", err, b)
	}
	isolateConfig(t) // another user, or another machine
	code, out := runCmd(runSend, "--nats", s.ClientURL(), ev)
	if code == 0 || !strings.Contains(strings.ToLower(out), "authorization violation") {
		t.Fatalf("send without credentials: exit %d, want a refusal naming the authorization: %s", code, out)
	}
	if got := lastSeq(t, s); got != 30 {
		t.Fatalf("stream last sequence %d after a refused send, want 30", got)
	}
}

// TestBusCommandsPresentCredentials: send, replay (stream range) and
// priors import present the credentials of the shared flags, or of the
// WAYMARK_NATS_* variables, and are refused without them.
func TestBusCommandsPresentCredentials(t *testing.T) {
	isolateConfig(t) // nothing recorded: only what the command is given counts
	s := authServer(t, stream.ServerAuth{Password: "bus-secret"})
	url := s.ClientURL()
	ev := writeEvents(t, 20)
	priors := filepath.Join(t.TempDir(), "priors.ndjson")
	if err := os.WriteFile(priors, []byte(`{"format":"waymark-priors","version":1}`+"\n"+
		`{"model":"iknn","item":"tent-1","neighbors":[{"item":"tent-2","weight":1}]}`+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	cmds := []struct {
		name string
		run  func(context.Context, []string, io.Writer, io.Writer) int
		args []string
	}{
		{"send", runSend, []string{ev}},
		{"priors import", priorsImport, []string{priors}},
		{"replay", runReplay, []string{"--quiet"}},
	}
	creds := []struct {
		name  string
		flags []string
		env   map[string]string
		ok    bool
	}{
		{"flags", []string{"--nats-user", stream.DefaultServerUser, "--nats-password", "bus-secret"}, nil, true},
		{"environment", nil, map[string]string{"WAYMARK_NATS_USER": stream.DefaultServerUser, "WAYMARK_NATS_PASSWORD": "bus-secret"}, true},
		{"wrong password", []string{"--nats-user", stream.DefaultServerUser, "--nats-password", "guess"}, nil, false},
		{"none", nil, nil, false},
	}
	for _, c := range cmds {
		for _, cr := range creds {
			t.Run(c.name+"/"+cr.name, func(t *testing.T) {
				for k, v := range cr.env {
					t.Setenv(k, v)
				}
				args := append(append([]string{"--nats", url}, cr.flags...), c.args...)
				code, out := runCmd(c.run, args...)
				if cr.ok && code != 0 {
					t.Fatalf("exit %d: %s", code, out)
				}
				if !cr.ok && (code == 0 || !strings.Contains(strings.ToLower(out), "authorization violation")) {
					t.Fatalf("exit %d, want a refusal naming the authorization: %s", code, out)
				}
			})
		}
	}
	// Two sends of 20 events and two imports of one row went through.
	if got := lastSeq(t, s); got != 42 {
		t.Errorf("stream last sequence %d, want 42 (2 x 20 events, 2 x 1 prior)", got)
	}
}

// TestSendTLSFlags: against a server that requires TLS, send connects with
// --nats-tls-ca and is refused without it.
func TestSendTLSFlags(t *testing.T) {
	isolateConfig(t)
	cert, key := selfSigned(t)
	s := authServer(t, stream.ServerAuth{Password: "pw", TLSCert: cert, TLSKey: key})
	ev := writeEvents(t, 5)
	base := []string{"--nats", s.ClientURL(), "--nats-user", stream.DefaultServerUser, "--nats-password", "pw"}
	if code, out := runCmd(runSend, append(base, ev)...); code == 0 {
		t.Fatalf("send without a CA for the server's certificate succeeded: %s", out)
	}
	if code, out := runCmd(runSend, append(base, "--nats-tls-ca", cert, ev)...); code != 0 {
		t.Fatalf("send with --nats-tls-ca: exit %d: %s", code, out)
	}
	if got := lastSeq(t, s); got != 5 {
		t.Errorf("stream last sequence %d, want 5", got)
	}
}

// TestServeWithTokenLocksTheBus runs serve's wiring with --auth-token (as
// the acceptance check state-busauth does): an anonymous publish to the
// events subject is refused over TCP, while send given only --nats finds
// the credentials serve recorded and its events are applied.
func TestServeWithTokenLocksTheBus(t *testing.T) {
	isolateConfig(t)
	f := newServeFlags("serve", io.Discard)
	if err := f.parse([]string{"--data", t.TempDir(), "--http", "127.0.0.1:0", "--nats-listen", "127.0.0.1:-1",
		"--flush-interval", "20ms", "--auth-token", "s3cret-token"}); err != nil {
		t.Fatal(err)
	}
	opts, err := f.options(slog.New(slog.DiscardHandler))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	svc, err := session.Open(ctx, opts)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { _ = svc.Shutdown(context.Background()) }()

	if nc, err := nats.Connect(svc.NATSURL()); err == nil {
		nc.Close()
		t.Fatal("an anonymous client connected to serve's embedded NATS server with --auth-token set")
	}
	ev := writeEvents(t, 12)
	if code, out := runCmd(runSend, "--nats", svc.NATSURL(), ev); code != 0 {
		t.Fatalf("send: exit %d: %s", code, out)
	}
	deadline := time.Now().Add(20 * time.Second)
	for svc.Engine().Stats().EventsApplied < 12 {
		if time.Now().After(deadline) {
			t.Fatalf("events not applied: %+v", svc.Engine().Stats())
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// selfSigned writes a self-signed certificate for 127.0.0.1 and its key.
func selfSigned(t *testing.T) (cert, key string) {
	t.Helper()
	k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1),
		Subject:      pkix.Name{CommonName: "bus"},
		NotBefore:    time.Now().Add(-time.Hour),
		NotAfter:     time.Now().Add(time.Hour),
		IPAddresses:  []net.IP{net.IPv4(127, 0, 0, 1)},
		ExtKeyUsage:  []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &k.PublicKey, k)
	if err != nil {
		t.Fatal(err)
	}
	kb, err := x509.MarshalECPrivateKey(k)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	cert, key = filepath.Join(dir, "bus.pem"), filepath.Join(dir, "bus.key")
	if err := os.WriteFile(cert, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(key, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb}), 0o600); err != nil {
		t.Fatal(err)
	}
	return cert, key
}
