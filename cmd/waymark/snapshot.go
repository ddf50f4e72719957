package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"net/http"
	"os"
	"time"
)

// runSnapshot asks a running service for a consistent store snapshot: into
// the NATS object store, where `serve --bootstrap` finds it, or into a file.
func runSnapshot(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("snapshot", flag.ContinueOnError)
	addr := fs.String("http", "http://127.0.0.1:8080", "`URL` of the running service")
	out := fs.String("out", "", "write the snapshot to this `file` instead of the NATS object store")
	token := fs.String("auth-token", os.Getenv("WAYMARK_AUTH_TOKEN"), "bearer `token` of the service (default $WAYMARK_AUTH_TOKEN)")
	const head = "usage: waymark snapshot [flags]\n\nAsk a running service for a consistent snapshot of its store (with the stream sequence it\nincludes). By default it goes to the NATS object store, where 'waymark serve --bootstrap'\nstarts a new replica from the newest one; --out writes it to a file instead, which\n'waymark serve --bootstrap=FILE' starts from.\n\nflags:\n"
	if code, ok := parseFlags(fs, head, args, stdout, stderr); !ok {
		return code
	}
	if fs.NArg() != 0 {
		return usageError(stderr, "snapshot", "unexpected argument %q", fs.Arg(0))
	}
	to := "bus"
	if *out != "" {
		to = "download"
	}
	ctx, cancel := context.WithTimeout(ctx, 30*time.Minute)
	defer cancel()
	resp, code := adminCall(ctx, "POST", *addr+"/v1/admin/snapshot?to="+to, *token, "waymark snapshot", stderr)
	if resp == nil {
		return code
	}
	defer resp.Body.Close()
	if *out == "" {
		_, _ = io.Copy(stdout, resp.Body)
		return 0
	}
	f, err := os.Create(*out)
	if err != nil {
		fmt.Fprintln(stderr, "waymark snapshot:", err)
		return 1
	}
	n, err := io.Copy(f, resp.Body)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		fmt.Fprintln(stderr, "waymark snapshot:", err)
		return 1
	}
	fmt.Fprintf(stdout, "wrote %s: %d bytes, state after stream sequence %s\n", *out, n, resp.Header.Get("Waymark-Seq"))
	return 0
}

// adminCall sends an admin request with the bearer token and returns the
// response when it is 200; otherwise it reports the failure on stderr and
// returns nil with the exit code (2: a bad URL, 1: the call failed).
func adminCall(ctx context.Context, method, url, token, name string, stderr io.Writer) (*http.Response, int) {
	req, err := http.NewRequestWithContext(ctx, method, url, nil)
	if err != nil {
		fmt.Fprintf(stderr, "%s: %v\n", name, err)
		return nil, 2
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		fmt.Fprintf(stderr, "%s: %v\n", name, err)
		return nil, 1
	}
	if resp.StatusCode != http.StatusOK {
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		fmt.Fprintf(stderr, "%s: %s: %s\n", name, resp.Status, b)
		return nil, 1
	}
	return resp, 0
}
