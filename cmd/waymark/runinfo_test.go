package main

import "testing"

// TestCommandLine checks that a recorded command reads back as the same
// arguments in a POSIX shell (quoting rules: common practice).
func TestCommandLine(t *testing.T) {
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"waymark", "replay", "--k", "20", "a.csv"}, "waymark replay --k 20 a.csv"},
		{[]string{"waymark", "replay", "--models", "blend(sr=1,pop=0)"}, "waymark replay --models 'blend(sr=1,pop=0)'"},
		{[]string{"waymark", "replay", "my file's.csv"}, `waymark replay 'my file'\''s.csv'`},
		{[]string{"waymark", "replay", ""}, "waymark replay ''"},
	}
	for _, c := range cases {
		if got := commandLine(c.args); got != c.want {
			t.Errorf("%q: %q, want %q", c.args, got, c.want)
		}
	}
	ri := runInfo("replay", []string{"--k", "20"})
	if ri.Command != "waymark replay --k 20" || ri.Version == "" {
		t.Errorf("run info %+v", ri)
	}
}
