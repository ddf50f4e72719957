package main

import (
	"io"
	"log/slog"
	"testing"
)

// --explore-share sets the share of slots that explore; the deprecated
// --explore-every N still works and means a share of 1/N (what one slot per
// N answered slots was meant to be).
func TestServeExploreFlags(t *testing.T) {
	for _, tc := range []struct {
		args    []string
		want    float64
		wantErr bool
	}{
		{nil, 0.10, false},
		{[]string{"--explore-share", "0.25"}, 0.25, false},
		{[]string{"--explore-share", "0"}, 0, false},
		{[]string{"--explore-every", "5"}, 0.2, false},
		{[]string{"--explore-every", "0"}, 0, false},
		{[]string{"--explore-every", "-1"}, 0, true},
		{[]string{"--explore-every", "ten"}, 0, true},
	} {
		f := newServeFlags("serve", io.Discard)
		err := f.fs.Parse(tc.args)
		if (err != nil) != tc.wantErr {
			t.Errorf("%v: error %v, want error %v", tc.args, err, tc.wantErr)
			continue
		}
		if err != nil {
			continue
		}
		o, err := f.options(slog.New(slog.DiscardHandler))
		if err != nil {
			t.Fatalf("%v: %v", tc.args, err)
		}
		if o.Engine.ExploreShare != tc.want {
			t.Errorf("%v: ExploreShare %g, want %g", tc.args, o.Engine.ExploreShare, tc.want)
		}
	}
}
