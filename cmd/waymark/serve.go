package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/pprof"
	"os"
	"runtime/debug"
	"strconv"
	"strings"
	"time"

	"waymark/cmd/waymark/internal/flagconf"
	"waymark/models"
	"waymark/session"
	"waymark/store"
)

// serveFlags holds serve's flags; the demo reuses them.
type serveFlags struct {
	fs       *flag.FlagSet
	config   string
	data     string
	http     string
	bus      *busFlags
	listen   string
	lis      *listenFlags
	stream   string
	subject  string
	catalog  string
	dlq      string
	replicas int
	maxAge   time.Duration
	maxBytes int64
	budget   byteSize
	memtable int64
	blend    string
	models   string
	halfLife time.Duration
	window   int
	timeout  time.Duration
	maxSess  int
	maxItems int
	capItem  int
	srWindow int
	flushInt time.Duration
	flushEv  int
	readyLag uint64
	sync     bool
	token    string
	boot     bootstrapFlag
	rebuild  bool
	explore  float64
	fresh    string
	seed     uint64
	debug    string
	logLevel string
	limits   session.Limits // HTTP limits (--max-inflight and the like)
}

func newServeFlags(name string, stderr io.Writer) *serveFlags {
	d := session.DefaultServiceOptions()
	f := &serveFlags{fs: flag.NewFlagSet(name, flag.ContinueOnError)}
	fs := f.fs
	fs.SetOutput(stderr)
	fs.StringVar(&f.config, "config", "", "JSON config `file` whose keys are these flag names")
	fs.StringVar(&f.data, "data", d.DataDir, "data `folder` for the store (and the embedded server's JetStream files)")
	fs.StringVar(&f.http, "http", d.HTTPAddr, "HTTP listen `address`")
	f.bus = addBusFlags(fs, "", "NATS `URL` of an existing server or cluster; empty starts an embedded server")
	fs.StringVar(&f.listen, "nats-listen", d.NATSListen, "listen `address` of the embedded NATS server")
	f.lis = addListenFlags(fs)
	fs.StringVar(&f.stream, "stream", d.Bus.Stream, "JetStream stream `name`")
	fs.StringVar(&f.subject, "subject", d.Bus.Subject, "`subject` of click events")
	fs.StringVar(&f.catalog, "catalog-subject", d.Bus.CatalogSubject, "`subject` of catalogue records")
	fs.IntVar(&f.replicas, "stream-replicas", d.Bus.Replicas, "replicas of the JetStream streams (3 on a three-node cluster)")
	fs.DurationVar(&f.maxAge, "stream-max-age", 0, "retention of the events stream: drop messages older than this (0: keep; snapshots must cover what is dropped)")
	fs.Int64Var(&f.maxBytes, "stream-max-bytes", 0, "retention of the events stream in bytes (0: no limit)")
	f.budget = byteSize(d.Store.MemoryBudget)
	fs.Var(&f.budget, "memory-budget", "memory `size` the process keeps under (e.g. 1GiB, 512MiB): sizes the store's memtables, caches and mapped files and the Go heap's limit (GOMEMLIMIT, when not set in the environment); learned state grows with items and tracked sessions within it, see deploy/SCALING.md")
	fs.Int64Var(&f.memtable, "store-memtable-mib", 0, "deprecated: use --memory-budget, which sizes the memtable (0: from the budget)")
	fs.StringVar(&f.dlq, "dead-letter-subject", d.Bus.DeadLetterSubject, "`subject` rejected messages are copied to")
	fs.StringVar(&f.blend, "blend", models.DefaultBlendSpec, "blend `spec` that answers queries (see \"models\" above)")
	fs.StringVar(&f.models, "models", "", "extra model `specs` to learn, comma-separated")
	fs.DurationVar(&f.halfLife, "half-life", models.DefaultHalfLife, "decay half-life of every count, in event time")
	fs.IntVar(&f.window, "window", d.Engine.Pipeline.Tracker.Window, "recent clicks kept per session")
	fs.DurationVar(&f.timeout, "session-timeout", d.Engine.Pipeline.Tracker.Timeout, "event-time inactivity that ends a session")
	fs.IntVar(&f.maxSess, "max-sessions", d.Engine.Pipeline.Tracker.MaxSessions, "sessions tracked at once (least recently active evicted); also caps the session-kNN index unless a spec says sessions=")
	fs.IntVar(&f.maxItems, "max-items", d.Engine.Pipeline.MaxItems, "item dictionary cap; clicks on new items beyond it are counted as overflow and not learned")
	fs.IntVar(&f.capItem, "neighbors-per-item", d.Engine.Pipeline.Set.CapPerItem, "neighbour list cap per item and model")
	fs.IntVar(&f.srWindow, "sr-window", d.Engine.Pipeline.Set.SRWindow, "Sequential Rules window m")
	fs.DurationVar(&f.flushInt, "flush-interval", d.Engine.FlushInterval, "longest time between flushes to the store")
	fs.IntVar(&f.flushEv, "flush-events", d.Engine.FlushEvents, "flush after this many messages")
	fs.Uint64Var(&f.readyLag, "ready-lag", d.ReadyLag, "consumer lag under which /readyz answers ready")
	fs.BoolVar(&f.sync, "sync", false, "fsync every store commit (survives power loss, slower)")
	fs.StringVar(&f.token, "auth-token", "", "bearer `token` required by write and admin endpoints (empty: none)")
	fs.Float64Var(&f.explore, "explore-share", d.Engine.ExploreShare, "`share` of all answered slots that explore new items, at most one per answer and never the first (0: off)")
	fs.Func("explore-every", "deprecated: use --explore-share; `N` sets the share to 1/N (0: off)", func(v string) error {
		n, err := strconv.Atoi(v)
		switch {
		case err != nil || n < 0:
			return fmt.Errorf("%q: want a whole number >= 0", v)
		case n == 0:
			f.explore = 0
		default:
			f.explore = 1 / float64(n)
		}
		return nil
	})
	fs.StringVar(&f.fresh, "fresh", d.Engine.Fresh, "`spec` of the fresh-item exploration model, e.g. fresh(window=48): items first seen within the window (hours) are new")
	fs.Uint64Var(&f.seed, "explore-seed", 0, "seed of the exploration draws, which depend on it and the request id")
	fs.Var(&f.boot, "bootstrap", "start an empty data folder from the newest snapshot in the NATS object store, or with --bootstrap=FILE from a file of 'waymark snapshot --out'")
	fs.BoolVar(&f.rebuild, "rebuild-from-stream", false, "discard learned state that cannot continue from the events stream (checkpoint ahead of it, a gap, a re-created stream, a damaged store) and relearn the stream as it is now; consistent state is kept")
	fs.StringVar(&f.debug, "debug-addr", "", "listen `address` for Go's pprof profiles (empty: off; keep it on loopback)")
	fs.StringVar(&f.logLevel, "log-level", "info", "log `level`: debug, info, warn, error")
	l := &f.limits
	*l = d.Limits
	fs.IntVar(&l.MaxInFlight, "max-inflight", l.MaxInFlight, "API requests answered at once; more get 429 with Retry-After (-1: no cap)")
	fs.IntVar(&l.MaxConns, "max-conns", l.MaxConns, "open HTTP connections; more wait to be accepted (-1: no cap)")
	fs.IntVar(&l.MaxBatchItems, "max-batch-items", l.MaxBatchItems, "items one batch may ask for (k summed over /v1/next/batch, candidates over /v1/score/batch); more get 413 (-1: no cap)")
	fs.DurationVar(&l.ReadTimeout, "http-read-timeout", l.ReadTimeout, "time to read a whole request, body included; a stalled body is cut after it (408)")
	return f
}

// parse parses args and layers environment (WAYMARK_*) and config file.
func (f *serveFlags) parse(args []string) error {
	if err := f.fs.Parse(args); err != nil {
		return err
	}
	return f.layer()
}

// layer fills the flags the command line left unset from the environment
// (WAYMARK_*) and the config file.
func (f *serveFlags) layer() error {
	cfg := f.config
	if cfg == "" {
		cfg = os.Getenv(flagconf.EnvName("WAYMARK_", "config"))
	}
	return flagconf.Apply(f.fs, "WAYMARK_", cfg, os.LookupEnv)
}

func (f *serveFlags) logger(w io.Writer) (*slog.Logger, error) {
	var lvl slog.Level
	if err := lvl.UnmarshalText([]byte(f.logLevel)); err != nil {
		return nil, fmt.Errorf("--log-level %q: %w", f.logLevel, err)
	}
	return slog.New(slog.NewTextHandler(w, &slog.HandlerOptions{Level: lvl})), nil
}

func (f *serveFlags) options(log *slog.Logger) (session.ServiceOptions, error) {
	o := session.DefaultServiceOptions()
	o.DataDir, o.HTTPAddr, o.NATSListen, o.ReadyLag = f.data, f.http, f.listen, f.readyLag
	f.bus.apply(&o.Bus)
	f.lis.apply(&o.NATSAuth)
	o.Bus.Stream, o.Bus.Subject, o.Bus.CatalogSubject, o.Bus.DeadLetterSubject = f.stream, f.subject, f.catalog, f.dlq
	o.Bus.Name = "waymark-serve"
	o.Bus.Replicas, o.Bus.MaxAge, o.Bus.MaxBytes = f.replicas, f.maxAge, f.maxBytes
	o.Store.MemoryBudget, o.Store.MemTableSize = int64(f.budget), f.memtable<<20
	if _, err := o.Store.Sizing(); err != nil {
		return o, fmt.Errorf("--memory-budget: %w", err)
	}
	o.Engine.Blend = f.blend
	o.Engine.ExploreShare, o.Engine.ExploreSeed, o.Engine.Fresh = f.explore, f.seed, f.fresh
	o.Engine.FlushInterval, o.Engine.FlushEvents = f.flushInt, f.flushEv
	o.Engine.CatalogSubject = f.catalog
	p := &o.Engine.Pipeline
	p.HalfLife, p.MaxItems = f.halfLife, f.maxItems
	p.Tracker.Window, p.Tracker.Timeout, p.Tracker.MaxSessions = f.window, f.timeout, f.maxSess
	p.Set.CapPerItem, p.Set.SRWindow = f.capItem, f.srWindow
	p.Models = []string{f.blend}
	if strings.TrimSpace(f.models) != "" {
		extra, err := models.SplitSpecs(f.models)
		if err != nil {
			return o, fmt.Errorf("--models: %w", err)
		}
		p.Models = append(p.Models, extra...)
	}
	o.Store.SyncWrites = f.sync
	o.Token = f.token
	o.Bootstrap, o.BootstrapFile = f.boot.on && f.boot.file == "", f.boot.file
	o.Limits = f.limits
	o.RebuildFromStream = f.rebuild
	o.Logger = log
	return o, nil
}

func runServe(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	f := newServeFlags("serve", stderr)
	if code, ok := parseFlags(f.fs, serveUsage(), args, stdout, stderr); !ok {
		return code
	}
	if err := f.layer(); err != nil {
		return usageError(stderr, "serve", "%v", err)
	}
	if f.fs.NArg() > 0 {
		return usageError(stderr, "serve", "unexpected argument %q (a snapshot file goes as --bootstrap=FILE)", f.fs.Arg(0))
	}
	log, err := f.logger(stderr)
	if err != nil {
		return usageError(stderr, "serve", "%v", err)
	}
	opts, err := f.options(log)
	if err != nil {
		return usageError(stderr, "serve", "%v", err)
	}
	eff, _ := json.Marshal(flagconf.Effective(f.fs, append(append([]string{"auth-token"}, busSecretFlags...), listenSecretFlags...)...))
	log.Info("effective config", "config", string(eff))
	if f.memtable != 0 {
		log.Warn("--store-memtable-mib is deprecated: --memory-budget sizes the memtable")
	}
	applyMemoryBudget(log, opts.Store)
	if f.debug != "" {
		go func() {
			mux := http.NewServeMux()
			mux.HandleFunc("/debug/pprof/", pprof.Index)
			mux.HandleFunc("/debug/pprof/profile", pprof.Profile)
			srv := &http.Server{Addr: f.debug, Handler: mux, ReadHeaderTimeout: 10 * time.Second}
			log.Info("pprof listening", "addr", f.debug, "err", srv.ListenAndServe())
		}()
	}
	svc, err := session.Open(ctx, opts)
	if errors.Is(err, session.ErrBadOption) || errors.Is(err, models.ErrBadSpec) || errors.Is(err, models.ErrUnknownModel) {
		// A configuration error, found before anything was created.
		return usageError(stderr, "serve", "%v", err)
	}
	if err != nil {
		log.Error("start failed", "err", err)
		return 1
	}
	code := 0
	select {
	case <-ctx.Done():
		log.Info("shutting down")
	case err := <-svc.Err():
		log.Error("fatal", "err", err)
		code = 1
	}
	sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := svc.Shutdown(sctx); err != nil {
		log.Error("shutdown", "err", err)
		code = 1
	}
	return code
}

// serveUsage is serve's help above the flags: what it does, where
// configuration comes from, and the model specs --blend and --models take,
// with the default blend written out in full (the name "blend" alone hides
// that it includes content and prior, which an explicit blend(...) drops).
func serveUsage() string {
	var b strings.Builder
	b.WriteString(`usage: waymark serve [flags]

Learn from click events on NATS JetStream and answer next-item queries over HTTP.
Every flag can also come from WAYMARK_<FLAG> (e.g. WAYMARK_HALF_LIFE) or the --config
file (a JSON object whose keys are the flag names); the command line wins, then the
environment, then the file.

models (--blend answers queries; --models learns more specs beside it; replay takes the same):
`)
	for _, m := range modelHelp {
		fmt.Fprintf(&b, "  %-30s %s\n", m.spec, m.what)
	}
	fmt.Fprintf(&b, `
The default --blend %q is %s: it learns its mixture from the stream. On a
sample of the clicks it learns, it scores a pool of mixtures of markov, sr, iknn, vsknn,
vstan and pop (each alone among them) by the reciprocal rank of the clicked item, decayed in
event time, and answers with the best; content and prior keep weight 1 in every mixture, and
content backs off as items gather clicks. /v1/stats shows the mixture in use. An explicit
blend(...) keeps fixed weights and uses only the parts it names (and pop=%g unless it gives
pop): blend(markov=1,sr=1,iknn=1) has no content or prior signal.

flags:
`, models.DefaultBlendSpec, defaultBlendName(), models.DefaultPopWeight)
	return b.String()
}

// modelHelp describes each model spec name, with its main parameters and
// their defaults (models/set.go and models/set_coldstart.go build them).
var modelHelp = []struct{ spec, what string }{
	{"pop", "decayed popularity"},
	{"markov", "first-order transitions"},
	{"sr(window=5)", "Sequential Rules: weight 1/gap within window steps"},
	{"iknn(span=1,shrink=0,covis=0)", "item-kNN: cosine over session co-visitation"},
	{"sknn, vsknn, vstan", "session-kNN, with position weights (V-SKNN), with decays (V-STAN)"},
	{"content", "TF-IDF cosine over catalogue attributes: neighbours of unclicked items"},
	{"fresh(window=48)", "Thompson sampling over impressions of young items (--fresh)"},
	{"trending(short=6,long=168)", "popularity and trend per context (empty sessions)"},
	{"prior(n0=20)", "imported item-item statistics, fading as local clicks arrive"},
	{"blend(NAME=WEIGHT,...)", "weighted sum of the named signals, each divided by its best"},
}

// defaultBlendName writes the default blend out with every part and weight.
func defaultBlendName() string {
	m, err := models.NewSet(models.DefaultSetOptions()).Get(models.DefaultBlendSpec)
	if err != nil {
		return models.DefaultBlendSpec
	}
	return m.Name()
}

// bootstrapFlag is --bootstrap: alone (or true) it starts an empty data
// folder from the newest snapshot in the NATS object store; =FILE starts it
// from a snapshot file. It stays a boolean flag, so that "--bootstrap"
// alone keeps working in existing deployments.
type bootstrapFlag struct {
	on   bool
	file string
}

func (b *bootstrapFlag) String() string {
	if b == nil {
		return "false"
	}
	if b.file != "" {
		return b.file
	}
	return strconv.FormatBool(b.on)
}

func (b *bootstrapFlag) Set(v string) error {
	if on, err := strconv.ParseBool(v); err == nil {
		b.on, b.file = on, ""
		return nil
	}
	b.on, b.file = true, v
	return nil
}

func (b *bootstrapFlag) IsBoolFlag() bool { return true }

// byteSize is a flag.Value of a size in bytes with an optional unit.
type byteSize int64

func (b *byteSize) String() string { return store.FormatBytes(int64(*b)) }

func (b *byteSize) Set(s string) error {
	n, err := store.ParseBytes(s)
	if err != nil {
		return err
	}
	*b = byteSize(n)
	return nil
}

// applyMemoryBudget sets the Go runtime's soft memory limit to the budget's
// heap share, so the collector works harder as the heap nears it instead of
// letting it double between collections. A GOMEMLIMIT in the environment is
// the operator's explicit choice and wins. The limit is process-wide, so
// serve sets it here rather than session.Open, which tests run several of.
func applyMemoryBudget(log *slog.Logger, so store.Options) {
	sz, err := so.Sizing()
	if err != nil {
		return // options() has refused it already
	}
	limit := sz.GoMemLimit
	if env := os.Getenv("GOMEMLIMIT"); env != "" {
		limit = debug.SetMemoryLimit(-1)
		log.Info("GOMEMLIMIT from the environment wins over the memory budget's heap share", "GOMEMLIMIT", env, "budget_heap", store.FormatBytes(sz.GoMemLimit))
	} else {
		debug.SetMemoryLimit(limit)
	}
	log.Info("memory budget", "budget", store.FormatBytes(sz.Budget), "go_mem_limit", limit,
		"memtable", store.FormatBytes(sz.MemTableSize), "memtables", sz.NumMemtables,
		"block_cache", store.FormatBytes(sz.BlockCacheSize), "index_cache", store.FormatBytes(sz.IndexCacheSize),
		"mapped_share", sz.Mapped)
}
