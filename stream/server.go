package stream

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"net/url"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/nats-io/nats-server/v2/server"
)

// ServerOptions configure the embedded NATS server.
type ServerOptions struct {
	// Dir is where JetStream stores streams (required). The server keeps its
	// files under Dir/jetstream.
	Dir string
	// Listen is host:port for clients, default 127.0.0.1:4222. Port 0 or -1
	// picks a free port; ClientURL reports it.
	Listen string
	// Logger receives the server's log lines; nil discards them.
	Logger *slog.Logger
	// Name is the server's name (default "waymark"); servers of one
	// cluster need distinct names.
	Name string
	// Cluster, when set, joins the server to a JetStream cluster.
	Cluster *ClusterOptions
	// Auth, when set, makes the client port require credentials (and
	// optionally TLS). Nil leaves it open to anyone who reaches it, which
	// only tests and benchmarks on loopback should do; serve always sets it.
	// Routes between cluster nodes are not covered (see ClusterOptions).
	Auth *ServerAuth
}

// ClusterOptions make an embedded server one node of a NATS cluster, as in
// tests of scale-out on loopback; production clusters are real NATS servers.
// The route port takes no credentials: keep it on loopback.
type ClusterOptions struct {
	Name   string   // cluster name, the same on every node
	Listen string   // host:port for routes from other nodes
	Routes []string // nats-route://host:port of every node (this one may be included)
}

// DefaultServerListen is where the embedded server listens unless told
// otherwise: loopback only, so one command is safe on a shared machine.
const DefaultServerListen = "127.0.0.1:4222"

// Server is an embedded NATS server with JetStream.
type Server struct {
	ns  *server.Server
	log *slog.Logger
	url string

	user, password string // full access; empty without ServerOptions.Auth
	tlsPin         string // the server's certificate file when it requires TLS
	credFile       string // the local credentials file written, if any
	credBytes      []byte // its content, to remove only what this server wrote

	shutdownOnce sync.Once
	shutdownDone chan struct{}
}

// StartServer starts an embedded NATS server with JetStream storing under
// opts.Dir and waits until it accepts clients (or ctx ends; without a
// deadline it waits at most 30 s).
func StartServer(ctx context.Context, opts ServerOptions) (*Server, error) {
	if opts.Dir == "" {
		return nil, fmt.Errorf("%w: server: Dir is required", ErrInvalidOptions)
	}
	if opts.Listen == "" {
		opts.Listen = DefaultServerListen
	}
	host, portStr, err := net.SplitHostPort(opts.Listen)
	if err != nil {
		return nil, fmt.Errorf("%w: server: Listen %q: %w", ErrInvalidOptions, opts.Listen, err)
	}
	port, err := strconv.Atoi(portStr)
	if err != nil || port < -1 || port > 65535 {
		return nil, fmt.Errorf("%w: server: Listen %q: port must be 0..65535 (0 or -1 for a free port)", ErrInvalidOptions, opts.Listen)
	}
	if port == 0 {
		port = server.RANDOM_PORT // nats-server reads 0 as "the default port"
	}
	if host == "" {
		host = "127.0.0.1"
	}
	log := opts.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	name := opts.Name
	if name == "" {
		name = "waymark"
	}
	so := &server.Options{
		ServerName: name,
		Host:       host,
		Port:       port,
		JetStream:  true,
		StoreDir:   opts.Dir,
		NoSigs:     true, // the process owns signals, not the library
		// HTTP monitoring and leafnodes stay off: the embedded server is the
		// single-process default, a real deployment brings its own NATS.
	}
	var user, password string
	if opts.Auth != nil {
		if user, password, err = applyServerAuth(so, opts.Auth, opts.Dir); err != nil {
			return nil, err
		}
	}
	if c := opts.Cluster; c != nil {
		ch, cp, err := net.SplitHostPort(c.Listen)
		if err != nil {
			return nil, fmt.Errorf("%w: server: Cluster.Listen %q: %w", ErrInvalidOptions, c.Listen, err)
		}
		cport, err := strconv.Atoi(cp)
		if err != nil {
			return nil, fmt.Errorf("%w: server: Cluster.Listen %q: bad port", ErrInvalidOptions, c.Listen)
		}
		so.Cluster = server.ClusterOpts{Name: c.Name, Host: ch, Port: cport}
		for _, r := range c.Routes {
			u, err := url.Parse(r)
			if err != nil {
				return nil, fmt.Errorf("%w: server: route %q: %w", ErrInvalidOptions, r, err)
			}
			so.Routes = append(so.Routes, u)
		}
	}
	ns, err := server.NewServer(so)
	if err != nil {
		return nil, fmt.Errorf("start nats server: %w", err)
	}
	sl := &serverLogger{log: log.With("component", "nats-server")}
	ns.SetLoggerV2(sl, false, false, false)
	go ns.Start() // Start returns once the accept loop runs; ReadyForConnections below waits for it.

	if _, ok := ctx.Deadline(); !ok {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, 30*time.Second)
		defer cancel()
	}
	for !ns.ReadyForConnections(50 * time.Millisecond) {
		if msg := sl.fatal(); msg != "" {
			ns.Shutdown()
			return nil, fmt.Errorf("start nats server on %s: %s", opts.Listen, msg)
		}
		if err := ctx.Err(); err != nil {
			ns.Shutdown()
			return nil, fmt.Errorf("start nats server on %s: not ready: %w", opts.Listen, err)
		}
	}
	if !ns.JetStreamEnabled() {
		ns.Shutdown()
		msg := sl.fatal()
		if msg == "" {
			msg = "jetstream did not start"
		}
		return nil, fmt.Errorf("start nats server: %s", msg)
	}
	s := &Server{ns: ns, log: log, shutdownDone: make(chan struct{}), user: user, password: password}
	s.url = clientURL(ns)
	if a := opts.Auth; a != nil {
		if a.TLSCert != "" {
			if s.tlsPin, err = filepath.Abs(a.TLSCert); err != nil {
				ns.Shutdown()
				return nil, fmt.Errorf("start nats server: %w", err)
			}
		}
		if a.CredentialsDir != "" {
			hp := strings.TrimPrefix(s.url, "nats://")
			s.credFile = LocalCredentialsFile(a.CredentialsDir, hp)
			s.credBytes, err = writeLocalCredentials(s.credFile, LocalCredentials{URL: s.url, User: user, Password: password, TLSPin: s.tlsPin})
			if err != nil {
				// Clients on this machine then need the credentials
				// given to them; the server itself is fine.
				log.Warn("could not record the bus credentials for local clients", "err", err)
				s.credFile = ""
			}
		}
	}
	if ip := net.ParseIP(host); opts.Auth != nil && s.tlsPin == "" && host != "localhost" && (ip == nil || !ip.IsLoopback()) {
		log.Warn("the embedded nats server listens beyond loopback without TLS: its password crosses the network in clear", "listen", opts.Listen)
	}
	log.Info("embedded nats server ready", "url", s.url, "dir", opts.Dir,
		"auth", opts.Auth != nil, "tls", s.tlsPin != "", "local_credentials", s.credFile)
	return s, nil
}

// ClientOptions returns o set up to connect to this server with full
// access: its URL, user and password, the pinned certificate when it
// requires TLS, and an inbox prefix anonymous clients cannot read.
func (s *Server) ClientOptions(o BusOptions) BusOptions {
	o.URL = s.url
	o.CredsFile, o.Token, o.NkeySeedFile = "", "", ""
	o.User, o.Password = s.user, s.password
	if s.tlsPin != "" {
		o.TLSPinFile, o.TLSCA = s.tlsPin, ""
	}
	if s.user != "" && o.InboxPrefix == "" {
		o.InboxPrefix = localInboxPrefix
	}
	return o
}

func clientURL(ns *server.Server) string {
	if a, ok := ns.Addr().(*net.TCPAddr); ok {
		ip := a.IP
		if ip == nil || ip.IsUnspecified() {
			ip = net.IPv4(127, 0, 0, 1)
		}
		return "nats://" + net.JoinHostPort(ip.String(), strconv.Itoa(a.Port))
	}
	return ns.ClientURL()
}

// ClientURL is the URL clients use to connect, with the real port.
func (s *Server) ClientURL() string { return s.url }

// Shutdown stops the server, waiting until it has stopped or ctx ends. When
// ctx ends first the shutdown still completes in the background and a later
// call waits for it again.
func (s *Server) Shutdown(ctx context.Context) error {
	s.shutdownOnce.Do(func() {
		go func() {
			if s.credFile != "" {
				removeIfSame(s.credFile, s.credBytes)
			}
			s.ns.Shutdown()
			s.ns.WaitForShutdown()
			close(s.shutdownDone)
		}()
	})
	select {
	case <-s.shutdownDone:
		return nil
	case <-ctx.Done():
		return fmt.Errorf("shutdown nats server: %w", ctx.Err())
	}
}

// serverLogger adapts the server's printf-style logger to slog and remembers
// the last fatal message, which is how the server reports a failed listen.
type serverLogger struct {
	log  *slog.Logger
	mu   sync.Mutex // protects last
	last string
}

func (l *serverLogger) fatal() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.last
}

func (l *serverLogger) Noticef(format string, v ...any) { l.log.Info(fmt.Sprintf(format, v...)) }
func (l *serverLogger) Warnf(format string, v ...any)   { l.log.Warn(fmt.Sprintf(format, v...)) }
func (l *serverLogger) Errorf(format string, v ...any)  { l.log.Error(fmt.Sprintf(format, v...)) }
func (l *serverLogger) Debugf(format string, v ...any)  { l.log.Debug(fmt.Sprintf(format, v...)) }
func (l *serverLogger) Tracef(format string, v ...any)  { l.log.Debug(fmt.Sprintf(format, v...)) }

// Fatalf logs at error level instead of exiting: a library must not end the
// process. StartServer turns the message into its error.
func (l *serverLogger) Fatalf(format string, v ...any) {
	msg := fmt.Sprintf(format, v...)
	l.mu.Lock()
	l.last = msg
	l.mu.Unlock()
	l.log.Error(msg)
}

var _ server.Logger = (*serverLogger)(nil)
