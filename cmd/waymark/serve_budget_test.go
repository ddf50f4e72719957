package main

import (
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"testing"

	"waymark/store"
)

// TestServeMemoryBudget: --memory-budget reaches the store's options from
// the command line, the environment and the config file like every flag,
// refuses what it cannot use, and the deprecated --store-memtable-mib
// still parses (issue 12).
func TestServeMemoryBudget(t *testing.T) {
	cfg := filepath.Join(t.TempDir(), "c.json")
	if err := os.WriteFile(cfg, []byte(`{"memory-budget": "768MiB"}`), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name     string
		args     []string
		env      string
		budget   int64
		memtable int64
		err      bool
	}{
		{name: "default", budget: store.DefaultMemoryBudget},
		{name: "flag", args: []string{"--memory-budget", "512MiB"}, budget: 512 << 20},
		{name: "plain bytes", args: []string{"--memory-budget=2147483648"}, budget: 2 << 30},
		{name: "environment", env: "3GiB", budget: 3 << 30},
		{name: "config file", args: []string{"--config", cfg}, budget: 768 << 20},
		{name: "flag over environment", args: []string{"--memory-budget", "2G"}, env: "3GiB", budget: 2 << 30},
		{name: "deprecated memtable", args: []string{"--store-memtable-mib", "16"}, budget: store.DefaultMemoryBudget, memtable: 16 << 20},
		{name: "below the minimum", args: []string{"--memory-budget", "64MiB"}, err: true},
		{name: "not a size", args: []string{"--memory-budget", "lots"}, err: true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if tc.env != "" {
				t.Setenv("WAYMARK_MEMORY_BUDGET", tc.env)
			}
			f := newServeFlags("serve", io.Discard)
			err := f.parse(tc.args)
			var so store.Options
			if err == nil {
				opts, oerr := f.options(slog.New(slog.DiscardHandler))
				err, so = oerr, opts.Store
			}
			if tc.err {
				if err == nil {
					t.Fatalf("%v accepted", tc.args)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if so.MemoryBudget != tc.budget || so.MemTableSize != tc.memtable {
				t.Errorf("store options: budget %d, memtable %d; want %d, %d", so.MemoryBudget, so.MemTableSize, tc.budget, tc.memtable)
			}
		})
	}
}
