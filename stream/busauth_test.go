package stream

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
)

// startAuthServer starts an embedded server on a random loopback port
// with auth, its files and credentials folder in temp dirs.
func startAuthServer(t *testing.T, dir string, a ServerAuth) *Server {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	s, err := StartServer(ctx, ServerOptions{Dir: dir, Listen: "127.0.0.1:-1", Auth: &a})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := s.Shutdown(ctx); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	})
	return s
}

// connectWith connects with DefaultBusOptions changed by mod; the local
// credentials lookup points at an empty folder unless mod sets it.
func connectWith(t *testing.T, url string, mod func(*BusOptions)) (*Bus, error) {
	t.Helper()
	o := DefaultBusOptions()
	o.URL, o.CredentialsDir, o.ReconnectWait = url, t.TempDir(), 50*time.Millisecond
	if mod != nil {
		mod(&o)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	b, err := Connect(ctx, o)
	if err == nil {
		t.Cleanup(b.Close)
	}
	return b, err
}

// TestServerAuthRefusesWithoutTheRightCredentials covers the open door of
// issue 12 (finding 3): with Auth set, the embedded server's TCP port
// refuses a client without credentials or with wrong ones, and a client
// with the right password has full access (streams, publish).
func TestServerAuthRefusesWithoutTheRightCredentials(t *testing.T) {
	s := startAuthServer(t, t.TempDir(), ServerAuth{Password: "right-pass"})
	cases := []struct {
		name string
		mod  func(*BusOptions)
		ok   bool
	}{
		{"no credentials", nil, false},
		{"wrong password", func(o *BusOptions) { o.User, o.Password = DefaultServerUser, "wrong-pass" }, false},
		{"wrong user", func(o *BusOptions) { o.User, o.Password = "someone", "right-pass" }, false},
		{"token instead of the password", func(o *BusOptions) { o.Token = "right-pass" }, false},
		{"password in the URL", func(o *BusOptions) {
			o.URL = strings.Replace(o.URL, "nats://", "nats://"+DefaultServerUser+":right-pass@", 1)
		}, true},
		{"right user and password", func(o *BusOptions) { o.User, o.Password = DefaultServerUser, "right-pass" }, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b, err := connectWith(t, s.ClientURL(), c.mod)
			if !c.ok {
				if !errors.Is(err, nats.ErrAuthorization) {
					t.Fatalf("connect: got %v, want an authorization violation", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			ctx := context.Background()
			if err := b.EnsureStreams(ctx); err != nil {
				t.Fatal(err)
			}
			if err := b.PublishEvents(ctx, []Event{{Session: "s", Item: "a", TS: 1767225600000}}); err != nil {
				t.Fatal(err)
			}
		})
	}
}

// TestServerAnonymousPublishOnly: AnonymousPublish lets a client without
// credentials publish to the listed subjects and nothing else: not the
// control subject (forget, priors), not the JetStream API (delete or purge a
// stream, write the snapshot bucket).
func TestServerAnonymousPublishOnly(t *testing.T) {
	d := DefaultBusOptions()
	s := startAuthServer(t, t.TempDir(), ServerAuth{Password: "pw", AnonymousPublish: []string{d.Subject, d.CatalogSubject}})
	full, err := connectWith(t, s.ClientURL(), func(o *BusOptions) { *o = s.ClientOptions(*o) })
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := full.EnsureStreams(ctx); err != nil {
		t.Fatal(err)
	}

	// The refusals arrive as asynchronous permission errors.
	asyncErrs := make(chan error, 16)
	nc, err := nats.Connect(s.ClientURL(), nats.Timeout(5*time.Second), nats.ErrorHandler(func(_ *nats.Conn, _ *nats.Subscription, err error) {
		select {
		case asyncErrs <- err:
		default:
		}
	}))
	if err != nil {
		t.Fatalf("anonymous connect with AnonymousPublish set: %v", err)
	}
	defer nc.Close()
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	pub := func(subj string) error {
		c, cancel := context.WithTimeout(ctx, 2*time.Second)
		defer cancel()
		_, err := js.Publish(c, subj, []byte(`{"session":"anon","item":"x","ts":1767225600000}`))
		return err
	}
	if err := pub(d.Subject); err != nil {
		t.Fatalf("anonymous publish to %s: %v", d.Subject, err)
	}
	if err := pub(d.ControlSubject); err == nil {
		t.Errorf("anonymous publish to %s was acknowledged", d.ControlSubject)
	}
	c, cancel2 := context.WithTimeout(ctx, 2*time.Second)
	err = js.DeleteStream(c, d.Stream)
	cancel2()
	if err == nil {
		t.Errorf("anonymous client deleted stream %s", d.Stream)
	}
	c, cancel3 := context.WithTimeout(ctx, 2*time.Second)
	_, err = js.CreateObjectStore(c, jetstream.ObjectStoreConfig{Bucket: d.SnapshotBucket()})
	cancel3()
	if err == nil {
		t.Errorf("anonymous client created the snapshot bucket")
	}
	// Full-access clients of the server reply to their own inbox prefix,
	// which the anonymous client may not read (it may read _INBOX.> for
	// its own acknowledgements).
	if _, err := nc.SubscribeSync(localInboxPrefix + ".>"); err != nil {
		t.Fatal(err)
	}
	_ = nc.Flush()
	deadline := time.After(10 * time.Second)
	for refused := false; !refused; {
		select {
		case err := <-asyncErrs:
			refused = strings.Contains(err.Error(), "Subscription") && strings.Contains(err.Error(), localInboxPrefix)
		case <-deadline:
			t.Fatalf("anonymous subscription to %s.> was not refused", localInboxPrefix)
		}
	}
	// What landed: exactly the one event, the stream still there.
	last, err := full.LastSequence(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if last != 1 {
		t.Errorf("stream last sequence %d after one allowed and one refused publish, want 1", last)
	}
}

// TestServerGeneratedPassword: without a password the server generates one
// into the data folder (0600) and keeps it across restarts, so recorded
// credentials and operators' copies stay valid.
func TestServerGeneratedPassword(t *testing.T) {
	dir := t.TempDir()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	start := func() *Server {
		s, err := StartServer(ctx, ServerOptions{Dir: dir, Listen: "127.0.0.1:-1", Auth: &ServerAuth{}})
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	s := start()
	pf := filepath.Join(dir, "bus-password")
	st, err := os.Stat(pf)
	if err != nil {
		t.Fatal(err)
	}
	if st.Mode().Perm() != 0o600 {
		t.Errorf("%s mode %v, want 0600", pf, st.Mode().Perm())
	}
	b, _ := os.ReadFile(pf)
	first := strings.TrimSpace(string(b))
	if len(first) != 64 { // 32 random bytes in hex
		t.Errorf("generated password %q: %d characters, want 64", first, len(first))
	}
	if _, err := connectWith(t, s.ClientURL(), func(o *BusOptions) { o.User, o.Password = DefaultServerUser, first }); err != nil {
		t.Fatal(err)
	}
	if err := s.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	s = start()
	defer s.Shutdown(ctx)
	if got := s.ClientOptions(BusOptions{}).Password; got != first {
		t.Errorf("restart changed the password")
	}
	if _, err := connectWith(t, s.ClientURL(), nil); !errors.Is(err, nats.ErrAuthorization) {
		t.Errorf("anonymous connect: %v, want an authorization violation", err)
	}
}

// TestLocalCredentialsFile: a server records its credentials per address
// in CredentialsDir (0600); a client given no credentials finds them there
// by its URL, also as localhost; Shutdown removes the file.
func TestLocalCredentialsFile(t *testing.T) {
	creds := t.TempDir()
	s1 := startAuthServer(t, t.TempDir(), ServerAuth{CredentialsDir: creds})
	s2 := startAuthServer(t, t.TempDir(), ServerAuth{CredentialsDir: creds})
	for _, s := range []*Server{s1, s2} {
		hp := strings.TrimPrefix(s.ClientURL(), "nats://")
		path := LocalCredentialsFile(creds, hp)
		st, err := os.Stat(path)
		if err != nil {
			t.Fatalf("no credentials file for %s: %v", hp, err)
		}
		if st.Mode().Perm() != 0o600 {
			t.Errorf("%s mode %v, want 0600", path, st.Mode().Perm())
		}
		_, port, _ := net.SplitHostPort(hp)
		for _, url := range []string{s.ClientURL(), "nats://localhost:" + port} {
			b, err := connectWith(t, url, func(o *BusOptions) { o.CredentialsDir = creds })
			if err != nil {
				t.Fatalf("connect to %s with the recorded credentials: %v", url, err)
			}
			if err := b.EnsureStreams(context.Background()); err != nil {
				t.Fatal(err)
			}
		}
	}
	if _, err := connectWith(t, s1.ClientURL(), nil); !errors.Is(err, nats.ErrAuthorization) {
		t.Errorf("connect without the credentials folder: %v, want an authorization violation", err)
	}
	path := LocalCredentialsFile(creds, strings.TrimPrefix(s1.ClientURL(), "nats://"))
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := s1.Shutdown(ctx); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(path); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("credentials file still there after shutdown: %v", err)
	}
}

// writeSelfSigned writes a self-signed certificate for 127.0.0.1 and its
// key into dir.
func writeSelfSigned(t *testing.T, dir, name string) (cert, key string) {
	t.Helper()
	k, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1),
		Subject:      pkix.Name{CommonName: name},
		NotBefore:    time.Now().Add(-time.Hour),
		NotAfter:     time.Now().Add(time.Hour),
		IPAddresses:  []net.IP{net.IPv4(127, 0, 0, 1)},
		KeyUsage:     x509.KeyUsageDigitalSignature,
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
	cert, key = filepath.Join(dir, name+".pem"), filepath.Join(dir, name+".key")
	if err := os.WriteFile(cert, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(key, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kb}), 0o600); err != nil {
		t.Fatal(err)
	}
	return cert, key
}

// TestServerTLS: with a certificate the client port requires TLS. A client
// pinning that certificate, or trusting it as CA, connects; one without
// TLS settings, or pinning another certificate, does not.
func TestServerTLS(t *testing.T) {
	pki := t.TempDir()
	cert, key := writeSelfSigned(t, pki, "server")
	other, _ := writeSelfSigned(t, pki, "other")
	creds := t.TempDir()
	s := startAuthServer(t, t.TempDir(), ServerAuth{Password: "pw", TLSCert: cert, TLSKey: key, CredentialsDir: creds})
	withPW := func(o *BusOptions) { o.User, o.Password = DefaultServerUser, "pw" }
	cases := []struct {
		name string
		mod  func(*BusOptions)
		ok   bool
	}{
		{"server's own client options", func(o *BusOptions) { *o = s.ClientOptions(*o) }, true},
		{"recorded local credentials", func(o *BusOptions) { o.CredentialsDir = creds }, true},
		{"CA file", func(o *BusOptions) { withPW(o); o.TLSCA = cert }, true},
		{"no TLS settings", withPW, false},
		{"another pinned certificate", func(o *BusOptions) { withPW(o); o.TLSPinFile = other }, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b, err := connectWith(t, s.ClientURL(), c.mod)
			if !c.ok {
				if err == nil {
					t.Fatal("connected")
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if err := b.EnsureStreams(context.Background()); err != nil {
				t.Fatal(err)
			}
		})
	}
}

// TestBusOptionsCredentialKinds: one kind of credentials at a time.
func TestBusOptionsCredentialKinds(t *testing.T) {
	for _, c := range []struct {
		name string
		mod  func(*BusOptions)
		bad  string
	}{
		{"token and user", func(o *BusOptions) { o.Token, o.User, o.Password = "t", "u", "p" }, "one kind"},
		{"creds and nkey", func(o *BusOptions) { o.CredsFile, o.NkeySeedFile = "a", "b" }, "one kind"},
		{"password without user", func(o *BusOptions) { o.Password = "p" }, "Password"},
		{"pin and CA", func(o *BusOptions) { o.TLSPinFile, o.TLSCA = "a", "b" }, "TLSPinFile"},
	} {
		t.Run(c.name, func(t *testing.T) {
			o := DefaultBusOptions()
			c.mod(&o)
			err := o.withDefaults().validate()
			if !errors.Is(err, ErrInvalidOptions) || !strings.Contains(err.Error(), c.bad) {
				t.Fatalf("got %v, want ErrInvalidOptions naming %q", err, c.bad)
			}
		})
	}
}
