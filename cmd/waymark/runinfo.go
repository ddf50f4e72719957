package main

import (
	"runtime/debug"
	"strings"

	"waymark/models/eval"
)

// runInfo names this build and the command line of a replay, so a report
// can be traced to the code and the flags that produced it. The version is
// the module's (a tag when installed from one, "(devel)" from a work tree);
// the commit is the VCS revision go build stamped, marked "+changes" when the
// work tree had uncommitted changes.
func runInfo(sub string, args []string) *eval.RunInfo {
	ri := &eval.RunInfo{Version: "(unknown)", Command: commandLine(append([]string{"waymark", sub}, args...))}
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return ri
	}
	ri.Version = bi.Main.Version
	var rev string
	var dirty bool
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			dirty = s.Value == "true"
		}
	}
	if len(rev) > 12 {
		rev = rev[:12]
	}
	if rev != "" && dirty {
		rev += "+changes"
	}
	ri.Commit = rev
	return ri
}

// commandLine joins arguments as a shell would read them back, quoting
// the ones that need it.
func commandLine(args []string) string {
	out := make([]string, len(args))
	for i, a := range args {
		if a != "" && !strings.ContainsAny(a, " \t\n'\"\\$`*?[]{}()<>|&;#~") {
			out[i] = a
			continue
		}
		out[i] = "'" + strings.ReplaceAll(a, "'", `'\''`) + "'"
	}
	return strings.Join(out, " ")
}
