package main

import (
	"bufio"
	"compress/gzip"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"
)

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

func run(args []string, stdout, stderr io.Writer) int {
	d := DefaultOptions()
	fs := flag.NewFlagSet("coldscenario", flag.ContinueOnError)
	fs.SetOutput(stderr)
	out := fs.String("out", "", "output `folder` (created if missing)")
	o := d
	fs.Uint64Var(&o.Seed, "seed", d.Seed, "random seed")
	start := fs.String("start", d.Start.Format(time.RFC3339), "first site's opening `time` (RFC 3339)")
	fs.IntVar(&o.Days, "days", d.Days, "days of the first site's stream")
	fs.IntVar(&o.Items, "items", d.Items, "first site's opening catalogue")
	fs.IntVar(&o.LaunchesPerDay, "launches-per-day", d.LaunchesPerDay, "items launched each day")
	fs.IntVar(&o.SessionsPerDay, "sessions-per-day", d.SessionsPerDay, "first site's sessions a day")
	fs.DurationVar(&o.BOpen, "b-open", d.BOpen, "second site opens this long after the first")
	fs.IntVar(&o.BSessionsPerDay, "b-sessions-per-day", d.BSessionsPerDay, "second site's sessions a day")
	fs.Float64Var(&o.BShare, "b-share", d.BShare, "share of the first site's items the second sells")
	fs.IntVar(&o.BLocal, "b-local", d.BLocal, "items only the second site sells")
	fs.Float64Var(&o.BNoise, "b-noise", d.BNoise, "spread of the second site's item appeal around the first's (log scale)")
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if *out == "" || fs.NArg() > 0 {
		fmt.Fprintln(stderr, "usage: coldscenario --out FOLDER [flags]")
		return 2
	}
	t, err := time.Parse(time.RFC3339, *start)
	if err != nil {
		fmt.Fprintf(stderr, "coldscenario: --start %q is not an RFC 3339 time\n", *start)
		return 2
	}
	o.Start = t.UTC()
	s, err := Generate(o)
	if err != nil {
		fmt.Fprintln(stderr, "coldscenario:", err)
		return 2
	}
	sum, err := s.Write(*out)
	if err != nil {
		fmt.Fprintln(stderr, "coldscenario:", err)
		return 1
	}
	for _, st := range sum.Sites {
		fmt.Fprintf(stdout, "%s: %d events, %d sessions, %d catalogue records (%d launched after opening), %s to %s\n",
			st.Name, st.Events, st.Sessions, st.Records, st.Launched, st.Open, st.End)
	}
	fmt.Fprintf(stdout, "id map: %d items; wrote %s\n", sum.Mapped, *out)
	return 0
}

// Summary is scenario.json.
type Summary struct {
	Options struct {
		Seed            uint64  `json:"seed"`
		Start           string  `json:"start"`
		Days            int     `json:"days"`
		Items           int     `json:"items"`
		LaunchesPerDay  int     `json:"launches_per_day"`
		SessionsPerDay  int     `json:"sessions_per_day"`
		BOpen           string  `json:"b_open"`
		BSessionsPerDay int     `json:"b_sessions_per_day"`
		BShare          float64 `json:"b_share"`
		BLocal          int     `json:"b_local"`
		BNoise          float64 `json:"b_noise"`
	} `json:"options"`
	Sites  []SiteSummary `json:"sites"`
	Mapped int           `json:"mapped_items"`
}

// SiteSummary counts one site's files.
type SiteSummary struct {
	Name     string `json:"name"`
	Open     string `json:"open"`
	End      string `json:"end"`
	Events   int    `json:"events"`
	Sessions int    `json:"sessions"`
	Records  int    `json:"catalogue_records"`
	Launched int    `json:"launched_after_open"`
	// FreshClicks counts clicks on items launched after the site opened,
	// in their first 48 hours.
	FreshClicks int `json:"clicks_on_launches_under_48h"`
}

// Write writes the scenario's files into dir.
func (s *Scenario) Write(dir string) (*Summary, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, err
	}
	sum := &Summary{Mapped: len(s.IDMap)}
	o := s.Opts
	so := &sum.Options
	so.Seed, so.Start, so.Days, so.Items, so.LaunchesPerDay, so.SessionsPerDay = o.Seed, o.Start.Format(time.RFC3339), o.Days, o.Items, o.LaunchesPerDay, o.SessionsPerDay
	so.BOpen, so.BSessionsPerDay, so.BShare, so.BLocal, so.BNoise = o.Start.Add(o.BOpen).Format(time.RFC3339), o.BSessionsPerDay, o.BShare, o.BLocal, o.BNoise
	for no, name := range []string{"site-a", "site-b"} {
		if err := writeFile(filepath.Join(dir, name+".events.jsonl.gz"), func(w io.Writer) error {
			zw := gzip.NewWriter(w)
			// A fixed header (no name, no time) keeps the bytes a function
			// of the options alone.
			zw.ModTime = time.Time{}
			var line []byte
			for _, ev := range s.Events[no] {
				line = append(ev.AppendJSON(line[:0]), '\n')
				if _, err := zw.Write(line); err != nil {
					return err
				}
			}
			return zw.Close()
		}); err != nil {
			return nil, err
		}
		if err := writeFile(filepath.Join(dir, name+".catalog.jsonl"), func(w io.Writer) error {
			var line []byte
			for _, r := range s.Catalog[no] {
				line = append(r.AppendJSON(line[:0]), '\n')
				if _, err := w.Write(line); err != nil {
					return err
				}
			}
			return nil
		}); err != nil {
			return nil, err
		}
		sum.Sites = append(sum.Sites, s.summarize(no, name))
	}
	if err := writeFile(filepath.Join(dir, "idmap.csv"), func(w io.Writer) error {
		cw := csv.NewWriter(w)
		if err := cw.Write([]string{"from", "to"}); err != nil {
			return err
		}
		for _, p := range s.IDMap {
			if err := cw.Write(p[:]); err != nil {
				return err
			}
		}
		cw.Flush()
		return cw.Error()
	}); err != nil {
		return nil, err
	}
	err := writeFile(filepath.Join(dir, "scenario.json"), func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(sum)
	})
	return sum, err
}

func (s *Scenario) summarize(no int, name string) SiteSummary {
	st := &s.sites[no]
	ss := SiteSummary{Name: name, Open: time.UnixMilli(st.open).UTC().Format(time.RFC3339), End: time.UnixMilli(st.end).UTC().Format(time.RFC3339),
		Events: len(s.Events[no]), Records: len(s.Catalog[no])}
	born := map[string]int64{}
	for _, r := range s.Catalog[no] {
		born[r.Item] = r.Published
		if r.Published > st.open {
			ss.Launched++
		}
	}
	sessions := map[string]bool{}
	for _, ev := range s.Events[no] {
		sessions[ev.Session] = true
		if ev.TS-born[ev.Item] < 48*time.Hour.Milliseconds() && born[ev.Item] > st.open {
			ss.FreshClicks++
		}
	}
	ss.Sessions = len(sessions)
	return ss
}

func writeFile(path string, write func(io.Writer) error) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(f, 1<<16)
	if err := write(bw); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := bw.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	return f.Close()
}
