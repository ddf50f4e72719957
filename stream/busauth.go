package stream

import (
	"bytes"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"encoding/hex"
	"encoding/json"
	"encoding/pem"
	"errors"
	"fmt"
	"io/fs"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"strings"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
)

// ServerAuth are the access rules of the embedded server's client port. A
// server started with them refuses a client that presents no credentials
// unless AnonymousPublish lets it publish to a few subjects, and refuses
// wrong ones always.
type ServerAuth struct {
	// User and Password grant full access: every subject and the JetStream
	// API (create, delete and purge streams, the snapshot bucket). User
	// defaults to DefaultServerUser. An empty Password is read from
	// PasswordFile, which is generated (32 random bytes, hex) when missing.
	User, Password string
	// PasswordFile holds the generated password, default
	// <ServerOptions.Dir>/bus-password, mode 0600.
	PasswordFile string
	// AnonymousPublish lists subjects a client without credentials may
	// publish to; it may also subscribe to _INBOX.> to receive the
	// acknowledgements. Nothing else: no control subject, no JetStream
	// API. Empty refuses a client without credentials.
	AnonymousPublish []string
	// TLSCert and TLSKey (PEM files), when set, make the client port
	// require TLS. TLSClientCA, when set, also requires a client
	// certificate signed by it.
	TLSCert, TLSKey, TLSClientCA string
	// CredentialsDir, when set, receives a credentials file for this
	// server's client address (LocalCredentialsFile), mode 0600, so that
	// clients run by the same user find them (BusOptions.CredentialsDir).
	// Shutdown removes it.
	CredentialsDir string
}

// DefaultServerUser is the full-access user of the embedded server.
const DefaultServerUser = "waymark"

// anonymousUser is the user a client without credentials is mapped to when
// ServerAuth.AnonymousPublish is set.
const anonymousUser = "anonymous"

// localInboxPrefix replaces _INBOX for clients holding full credentials of
// an embedded server, so that an anonymous client, which may subscribe to
// _INBOX.> for its own acknowledgements, cannot read their replies (fetched
// messages, snapshot chunks).
const localInboxPrefix = "_WAYMARK_INBOX"

// LocalCredentials is what an embedded server records for local clients.
type LocalCredentials struct {
	URL      string `json:"url"`
	User     string `json:"user"`
	Password string `json:"password"`
	// TLSPin is the server's certificate file when it requires TLS:
	// clients accept exactly that certificate (BusOptions.TLSPinFile).
	TLSPin string `json:"tls_pin,omitempty"`
}

// DefaultCredentialsDir is where embedded servers record, and clients look
// for, local credentials: <user config dir>/waymark/bus
// ($XDG_CONFIG_HOME or ~/.config on Linux). It is "" when the user has no
// config folder (no HOME), which turns recording and lookup off.
func DefaultCredentialsDir() string {
	d, err := os.UserConfigDir()
	if err != nil {
		return ""
	}
	return filepath.Join(d, "waymark", "bus")
}

// LocalCredentialsFile is the file in dir for the server at hostport
// (host:port as in the client URL): one file per address, so servers on
// different ports never write the same file.
func LocalCredentialsFile(dir, hostport string) string {
	key := []byte(hostport)
	for i, c := range key {
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '.' || c == '-') {
			key[i] = '_'
		}
	}
	return filepath.Join(dir, string(key))
}

// ReadLocalCredentials returns the credentials recorded in dir for the
// server of rawURL (one URL, such as nats://127.0.0.1:4222). A loopback host
// name (localhost, ::1) also finds what a server recorded under 127.0.0.1.
// ok is false when none is recorded.
func ReadLocalCredentials(dir, rawURL string) (c LocalCredentials, path string, ok bool, err error) {
	hp, err := urlHostPort(rawURL)
	if err != nil {
		return c, "", false, err
	}
	cands := []string{hp}
	if h, p, err := net.SplitHostPort(hp); err == nil && (h == "localhost" || h == "::1") {
		cands = append(cands, net.JoinHostPort("127.0.0.1", p))
	}
	for _, hp := range cands {
		path = LocalCredentialsFile(dir, hp)
		b, err := os.ReadFile(path)
		if errors.Is(err, fs.ErrNotExist) {
			continue
		}
		if err != nil {
			return c, path, false, fmt.Errorf("local bus credentials: %w", err)
		}
		if err := json.Unmarshal(b, &c); err != nil {
			return c, path, false, fmt.Errorf("local bus credentials %s: %w", path, err)
		}
		return c, path, true, nil
	}
	return c, "", false, nil
}

// urlHostPort returns host:port of a NATS URL, with the default port 4222.
func urlHostPort(rawURL string) (string, error) {
	s := strings.TrimSpace(rawURL)
	if !strings.Contains(s, "://") {
		s = "nats://" + s
	}
	u, err := url.Parse(s)
	if err != nil {
		return "", fmt.Errorf("nats url %q: %w", rawURL, err)
	}
	port := u.Port()
	if port == "" {
		port = "4222"
	}
	return net.JoinHostPort(u.Hostname(), port), nil
}

// writeLocalCredentials writes c to path atomically (temporary file in the
// same folder, then rename), mode 0600 in a 0700 folder.
func writeLocalCredentials(path string, c LocalCredentials) ([]byte, error) {
	b, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return nil, err
	}
	b = append(b, '\n')
	if err := writeFileAtomic(path, b); err != nil {
		return nil, fmt.Errorf("local bus credentials: %w", err)
	}
	return b, nil
}

func writeFileAtomic(path string, b []byte) error {
	dir := filepath.Dir(path)
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return err
	}
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".*") // CreateTemp makes it 0600
	if err != nil {
		return err
	}
	tmp := f.Name()
	_, err = f.Write(b)
	if serr := f.Sync(); err == nil {
		err = serr
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, path)
	}
	if err != nil {
		_ = os.Remove(tmp)
	}
	return err
}

// removeIfSame removes path when it still holds b: a server that stops
// does not delete what a later server on the same address wrote.
func removeIfSame(path string, b []byte) {
	cur, err := os.ReadFile(path)
	if err == nil && bytes.Equal(cur, b) {
		_ = os.Remove(path)
	}
}

// loadOrCreatePassword returns the password in path, generating one from
// crypto/rand into a new 0600 file when the file is missing.
func loadOrCreatePassword(path string) (string, error) {
	b, err := os.ReadFile(path)
	if err == nil {
		p := strings.TrimSpace(string(b))
		if p == "" {
			return "", fmt.Errorf("%w: bus password file %s is empty", ErrInvalidOptions, path)
		}
		return p, nil
	}
	if !errors.Is(err, fs.ErrNotExist) {
		return "", fmt.Errorf("bus password: %w", err)
	}
	var raw [32]byte
	if _, err := rand.Read(raw[:]); err != nil {
		return "", fmt.Errorf("bus password: %w", err)
	}
	p := hex.EncodeToString(raw[:])
	if err := writeFileAtomic(path, []byte(p+"\n")); err != nil {
		return "", fmt.Errorf("bus password: %w", err)
	}
	return p, nil
}

// applyServerAuth sets the users, permissions and TLS of so from a and
// returns the user and password of full access.
func applyServerAuth(so *server.Options, a *ServerAuth, dir string) (user, password string, err error) {
	user, password = a.User, a.Password
	if user == "" {
		user = DefaultServerUser
	}
	if user == anonymousUser {
		return "", "", fmt.Errorf("%w: server: user %q is reserved for clients without credentials", ErrInvalidOptions, user)
	}
	if password == "" {
		pf := a.PasswordFile
		if pf == "" {
			pf = filepath.Join(dir, "bus-password")
		}
		if password, err = loadOrCreatePassword(pf); err != nil {
			return "", "", err
		}
	}
	so.Users = []*server.User{{Username: user, Password: password}}
	if len(a.AnonymousPublish) > 0 {
		for _, s := range a.AnonymousPublish {
			if err := checkLiteralSubject(s); err != nil {
				return "", "", fmt.Errorf("%w: server: AnonymousPublish %q: %w", ErrInvalidOptions, s, err)
			}
		}
		so.Users = append(so.Users, &server.User{Username: anonymousUser, Permissions: &server.Permissions{
			Publish:   &server.SubjectPermission{Allow: append([]string(nil), a.AnonymousPublish...)},
			Subscribe: &server.SubjectPermission{Allow: []string{"_INBOX.>"}},
		}})
		so.NoAuthUser = anonymousUser
	}
	if (a.TLSCert == "") != (a.TLSKey == "") {
		return "", "", fmt.Errorf("%w: server: TLSCert and TLSKey must be given together", ErrInvalidOptions)
	}
	if a.TLSClientCA != "" && a.TLSCert == "" {
		return "", "", fmt.Errorf("%w: server: TLSClientCA needs TLSCert and TLSKey", ErrInvalidOptions)
	}
	if a.TLSCert != "" {
		tc, err := server.GenTLSConfig(&server.TLSConfigOpts{
			CertFile: a.TLSCert, KeyFile: a.TLSKey, CaFile: a.TLSClientCA, Verify: a.TLSClientCA != "",
		})
		if err != nil {
			return "", "", fmt.Errorf("%w: server: TLS: %w", ErrInvalidOptions, err)
		}
		so.TLS, so.TLSConfig, so.TLSVerify = true, tc, a.TLSClientCA != ""
		so.TLSTimeout = 2 // seconds, the server's own default
	}
	return user, password, nil
}

// pinnedTLS returns a client TLS configuration that accepts exactly the
// certificate(s) in the PEM file pin: the client knows which certificate
// its server presents, so neither a CA nor the host name matter.
func pinnedTLS(pin string) (*tls.Config, error) {
	b, err := os.ReadFile(pin)
	if err != nil {
		return nil, fmt.Errorf("tls pin: %w", err)
	}
	var want [][]byte
	for {
		var blk *pem.Block
		blk, b = pem.Decode(b)
		if blk == nil {
			break
		}
		if blk.Type == "CERTIFICATE" {
			want = append(want, blk.Bytes)
		}
	}
	if len(want) == 0 {
		return nil, fmt.Errorf("tls pin %s: no certificate", pin)
	}
	return &tls.Config{
		MinVersion: tls.VersionTLS12,
		// The standard verification is replaced, not skipped: the
		// callback below accepts only the pinned certificate.
		InsecureSkipVerify: true,
		VerifyPeerCertificate: func(raw [][]byte, _ [][]*x509.Certificate) error {
			if len(raw) > 0 {
				for _, w := range want {
					if bytes.Equal(raw[0], w) {
						return nil
					}
				}
			}
			return fmt.Errorf("nats server certificate is not the pinned one (%s)", pin)
		},
	}, nil
}

// authOptions turns o's credentials, pinned certificate and inbox prefix
// into connect options. The pinned TLS configuration comes first so that a
// client certificate added after it lands in the same configuration.
func (o BusOptions) authOptions() ([]nats.Option, error) {
	var out []nats.Option
	if o.TLSPinFile != "" {
		tc, err := pinnedTLS(o.TLSPinFile)
		if err != nil {
			return nil, fmt.Errorf("%w: bus: TLSPinFile: %w", ErrInvalidOptions, err)
		}
		out = append(out, nats.Secure(tc))
	}
	switch {
	case o.CredsFile != "":
		out = append(out, nats.UserCredentials(o.CredsFile))
	case o.Token != "":
		out = append(out, nats.Token(o.Token))
	case o.User != "":
		out = append(out, nats.UserInfo(o.User, o.Password))
	case o.NkeySeedFile != "":
		nk, err := nats.NkeyOptionFromSeed(o.NkeySeedFile)
		if err != nil {
			return nil, fmt.Errorf("%w: bus: NkeySeedFile: %w", ErrInvalidOptions, err)
		}
		out = append(out, nk)
	}
	if o.InboxPrefix != "" {
		out = append(out, nats.CustomInboxPrefix(o.InboxPrefix))
	}
	return out, nil
}

// redactURL hides passwords in a comma-separated URL list for messages.
func redactURL(urls string) string {
	parts := strings.Split(urls, ",")
	for i, p := range parts {
		if u, err := url.Parse(strings.TrimSpace(p)); err == nil && u.User != nil {
			parts[i] = u.Redacted()
		}
	}
	return strings.Join(parts, ",")
}
