package main

import (
	"bytes"
	"compress/gzip"
	"context"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"

	"waymark/models"
	"waymark/stream"
)

// runCLI runs the command line in process and returns its exit code and
// both outputs.
func runCLI(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(context.Background(), args, &out, &errb)
	return code, out.String(), errb.String()
}

// placeholder matches a flag line of Go's PrintDefaults whose argument has
// no name of its own ("-models string"): the flag's usage lacks a
// back-quoted name. Numbers and durations keep Go's type names, which say
// what to type.
var placeholder = regexp.MustCompile(`(?m)^\s+-[\w-]+ (string|value)$`)

// TestHelpOnStdoutOnce checks issue 16's help rules for every command: the
// text goes to standard output (so `| less` shows it), once, with exit 0,
// nothing on standard error, no "Usage of" from Go's flag package and no
// nameless string placeholders.
func TestHelpOnStdoutOnce(t *testing.T) {
	cases := [][]string{
		{"--help"}, {"help"}, {"-h"},
		{"serve", "--help"}, {"send", "--help"}, {"replay", "--help"}, {"demo", "--help"},
		{"snapshot", "--help"}, {"priors", "--help"}, {"priors", "export", "--help"}, {"priors", "import", "-h"},
	}
	for _, args := range cases {
		t.Run(strings.Join(args, " "), func(t *testing.T) {
			code, out, errs := runCLI(t, args...)
			if code != 0 {
				t.Errorf("exit %d, want 0", code)
			}
			if errs != "" {
				t.Errorf("stderr not empty: %q", errs)
			}
			lines := strings.Split(strings.TrimRight(out, "\n"), "\n")
			if len(lines) < 3 {
				t.Fatalf("stdout has %d lines: %q", len(lines), out)
			}
			if strings.Count(out, lines[0]+"\n") != 1 {
				t.Errorf("first line %q printed more than once", lines[0])
			}
			if strings.Contains(out, "Usage of") {
				t.Error("Go's bare 'Usage of' text")
			}
			if m := placeholder.FindAllString(out, -1); len(m) > 0 {
				t.Errorf("flags without an argument name: %q", m)
			}
		})
	}
}

// TestTopLevelHelpNotCutOff checks that every command's summary ends as a
// sentence would, not on a dangling word (issue 16: demo's line ended "on
// the embedded default").
func TestTopLevelHelpNotCutOff(t *testing.T) {
	for _, c := range commands() {
		for _, dangling := range []string{" the", " default", " a", " on", " of", " to", " and"} {
			if strings.HasSuffix(c.summary, dangling) {
				t.Errorf("%s: summary %q ends on %q", c.name, c.summary, strings.TrimSpace(dangling))
			}
		}
	}
	_, out, _ := runCLI(t, "--help")
	if !strings.Contains(out, "run an invented shop end to end (embedded NATS, temporary folder)") {
		t.Errorf("demo line missing or cut off:\n%s", out)
	}
}

// TestServeHelpListsModels checks that serve --help names every model spec
// the set can build and writes the default blend out in full, with content
// and prior (what the name "blend" stands for is otherwise invisible).
func TestServeHelpListsModels(t *testing.T) {
	_, out, _ := runCLI(t, "serve", "--help")
	for _, name := range models.NewSet(models.DefaultSetOptions()).Names() {
		if !regexp.MustCompile(`(?m)^  .*\b` + name + `\b`).MatchString(out) {
			t.Errorf("model %q not listed", name)
		}
	}
	// The default is the learned blend (models/blendlearn.go): its name and
	// the signals its pool mixes must be on the page.
	for _, want := range []string{"blend(learned=1)", "learns its mixture", "vstan", "content and prior keep weight 1"} {
		if !strings.Contains(out, want) {
			t.Errorf("serve --help does not say %q about the default blend", want)
		}
	}
}

// TestUsageErrorsExit2 checks that a wrong invocation exits 2 with the
// message on stderr and nothing on stdout, for every command.
func TestUsageErrorsExit2(t *testing.T) {
	cases := []struct {
		args []string
		want string
	}{
		{nil, "usage: waymark COMMAND"},
		{[]string{"frobnicate"}, `unknown command "frobnicate"`},
		{[]string{"serve", "--bogus"}, "flag provided but not defined: -bogus"},
		{[]string{"serve", "--log-level", "loud"}, "--log-level"},
		{[]string{"serve", "--bootstrap", "snap.bak"}, "--bootstrap=FILE"},
		{[]string{"send"}, "no FILE given"},
		{[]string{"send", "--format", "parquet", "x"}, `--format "parquet"`},
		{[]string{"send", "--batch", "0", "x"}, "--batch 0"},
		{[]string{"replay"}, "give event files"},
		{[]string{"replay", "--k", "x", "f"}, "--k"},
		{[]string{"demo", "--days", "0"}, "--days"},
		{[]string{"snapshot", "extra"}, `unexpected argument "extra"`},
		{[]string{"priors"}, "usage: waymark priors"},
		{[]string{"priors", "move"}, `unknown subcommand "move"`},
		{[]string{"priors", "export", "out.jsonl"}, "--out"},
		{[]string{"priors", "import"}, "exactly one priors FILE"},
		{[]string{"priors", "import", "--weight", "0", "f"}, "--weight 0"},
		{[]string{"priors", "import", "--unmapped", "maybe", "f"}, `--unmapped "maybe"`},
	}
	for _, c := range cases {
		t.Run(strings.Join(c.args, " "), func(t *testing.T) {
			code, out, errs := runCLI(t, c.args...)
			if code != 2 {
				t.Errorf("exit %d, want 2", code)
			}
			if out != "" {
				t.Errorf("stdout not empty: %q", out)
			}
			if !strings.Contains(errs, c.want) {
				t.Errorf("stderr %q does not say %q", errs, c.want)
			}
		})
	}
}

// TestServeBadConfigCreatesNothing checks that a mistyped model spec, or a
// query model that is no blend, is reported (exit 2) before serve creates
// the data folder or starts the embedded NATS server.
func TestServeBadConfigCreatesNothing(t *testing.T) {
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"unknown blend part", []string{"--blend", "blend(markov=1,sx=1)"}, `unknown model: "sx"`},
		{"unknown extra model", []string{"--models", "markov,vknn"}, `"vknn"`},
		{"bad parameter", []string{"--models", "sr(windw=3)"}, "windw"},
		{"not a blend", []string{"--blend", "markov"}, "not a blend"},
		{"bad fresh spec", []string{"--fresh", "fresh(windw=3)"}, "windw"},
		{"missing bootstrap file", []string{"--bootstrap=/nonexistent/waymark.snapshot"}, "BootstrapFile"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			data := filepath.Join(t.TempDir(), "data")
			args := append([]string{"serve", "--data", data, "--http", "127.0.0.1:0", "--nats-listen", "127.0.0.1:-1"}, c.args...)
			code, _, errs := runCLI(t, args...)
			if code != 2 {
				t.Errorf("exit %d, want 2; stderr %s", code, errs)
			}
			if !strings.Contains(errs, c.want) {
				t.Errorf("stderr does not say %q: %s", c.want, errs)
			}
			if _, err := os.Stat(data); !os.IsNotExist(err) {
				t.Errorf("data folder exists after a configuration error (stat: %v)", err)
			}
		})
	}
}

// An invented e-shop file in the layout of the open dataset (the header is
// the dataset's; stream/dataset reads it): 6 clicks of 3 sessions on 3
// clothing models.
const eshopFile = "year;month;day;order(sells);country;session ID;page 1 (main category);page 2 (clothing model);colour;location;model photography;price;price 2;page\n" +
	"2026;1;5;1;29;7;1;A3;1;5;1;28;2;1\n" +
	"2026;1;5;2;29;7;2;B2;3;1;1;30;1;2\n" +
	"2026;1;5;1;9;8;3;C1;14;2;2;57;1;4\n" +
	"2026;1;5;2;9;8;1;A3;1;5;1;28;2;1\n" +
	"2026;1;6;1;12;9;2;B2;3;1;1;30;1;2\n" +
	"2026;1;6;2;12;9;3;C1;14;2;2;57;1;4\n"

// TestSendFormats publishes files of each format send reads to an embedded
// NATS server and counts what reached the stream's subjects; a file with a
// bad line is published except for that line and send exits 1 saying how
// many lines it rejected.
func TestSendFormats(t *testing.T) {
	dir := t.TempDir()
	write := func(name, body string, gz bool) string {
		p := filepath.Join(dir, name)
		var b bytes.Buffer
		if gz {
			w := gzip.NewWriter(&b)
			w.Write([]byte(body))
			w.Close()
		} else {
			b.WriteString(body)
		}
		if err := os.WriteFile(p, b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	ndjson := `{"session":"s","item":"a","ts":1767225600000}` + "\n" + `{"session":"s","item":"b","ts":1767225601000}` + "\n"
	csv := "session,item,ts\ns,a,1767225600000\ns,b,1767225601000\n"
	cases := []struct {
		name          string
		args          []string
		code          int
		events, items int    // messages on the events and catalogue subjects
		say           string // on stderr
	}{
		{"eshop detected", []string{write("shop.csv.gz", eshopFile, true)}, 0, 6, 3, ""},
		{"eshop named", []string{"--format", "eshop", write("shop2.csv.gz", eshopFile, true)}, 0, 6, 3, ""},
		{"eshop without catalogue", []string{"--format", "eshop", "--catalog=false", write("shop3.csv.gz", eshopFile, true)}, 0, 6, 0, ""},
		{"ndjson by name", []string{write("c.ndjson", ndjson, false)}, 0, 2, 0, ""},
		{"ndjson forced", []string{"--format", "ndjson", write("c.log", ndjson, false)}, 0, 2, 0, ""},
		{"csv forced", []string{"--format", "csv", write("c.txt", csv, false)}, 0, 2, 0, ""},
		{"csv by name", []string{"--format", "events", write("c.csv", csv, false)}, 0, 2, 0, ""},
		{"a rejected line", []string{write("mixed.ndjson", ndjson+"not json\n", false)}, 1, 2, 0, "1 invalid lines rejected"},
		{"eshop read as csv", []string{"--format", "csv", write("shop4.csv", eshopFile, false)}, 1, 0, 0, "missing column"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
			defer cancel()
			srv, err := stream.StartServer(ctx, stream.ServerOptions{Dir: t.TempDir(), Listen: "127.0.0.1:-1"})
			if err != nil {
				t.Fatal(err)
			}
			defer srv.Shutdown(context.Background())
			args := append([]string{"send", "--quiet", "--nats", srv.ClientURL()}, c.args...)
			code, out, errs := runCLI(t, args...)
			if code != c.code {
				t.Fatalf("exit %d, want %d; stdout %q stderr %q", code, c.code, out, errs)
			}
			if c.say != "" && !strings.Contains(errs, c.say) {
				t.Errorf("stderr does not say %q: %q", c.say, errs)
			}
			if c.code == 1 && c.events == 0 {
				return // failed before publishing: there may be no stream
			}
			bo := stream.DefaultBusOptions()
			bo.URL = srv.ClientURL()
			bus, err := stream.Connect(ctx, bo)
			if err != nil {
				t.Fatal(err)
			}
			defer bus.Close()
			s, err := bus.JetStream().Stream(ctx, bo.Stream)
			if err != nil {
				t.Fatal(err)
			}
			info, err := s.Info(ctx, jetstream.WithSubjectFilter(">"))
			if err != nil {
				t.Fatal(err)
			}
			if got := int(info.State.Subjects[bo.Subject]); got != c.events {
				t.Errorf("%d events on %s, want %d", got, bo.Subject, c.events)
			}
			if got := int(info.State.Subjects[bo.CatalogSubject]); got != c.items {
				t.Errorf("%d catalogue records on %s, want %d", got, bo.CatalogSubject, c.items)
			}
		})
	}
}
