package session

import (
	"bytes"
	"context"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"os/exec"
	"strings"
	"sync"
	"testing"
	"time"
)

// chromiumArgs keep a headless run off the network and out of the user's
// profile: the page must render from this origin alone.
func chromiumArgs(profile string) []string {
	return []string{
		"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
		"--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir=" + profile,
	}
}

// runChromium runs the browser with args and returns its standard output.
func runChromium(t *testing.T, bin string, args ...string) string {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	cmd := exec.CommandContext(ctx, bin, append(chromiumArgs(t.TempDir()), args...)...)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	cmd.WaitDelay = 5 * time.Second
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", args, err, errb.String())
	}
	return out.String()
}

// submitScript plays a visitor on the real page: type a session into the
// session form and press its button. Only this test page carries a script;
// the operator page has none.
const submitScript = `<script>
const f = document.getElementById("session-form");
f.elements.session.value = "A";
f.elements.k.value = "3";
f.requestSubmit();
</script>`

// TestPageBrowser loads the operator page in headless Chromium (Debian's
// chromium package) and submits the session form the way a browser does,
// then checks the DOM the browser built.
func TestPageBrowser(t *testing.T) {
	bin, err := exec.LookPath("chromium")
	if err != nil {
		if os.Getenv("WAYMARK_REQUIRE_BROWSER") != "" {
			t.Fatalf("WAYMARK_REQUIRE_BROWSER is set and chromium is not on PATH: %v", err)
		}
		t.Skip("chromium not on PATH (apt-get install chromium; .ci/run requires it)")
	}
	_, h := newPageService(t)

	var mu sync.Mutex
	var queries []string // query strings the browser asked "/" for
	mux := http.NewServeMux()
	mux.HandleFunc("GET /test/submit", func(w http.ResponseWriter, r *http.Request) {
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest("GET", "/", nil))
		page := strings.Replace(rec.Body.String(), "</body>", submitScript+"</body>", 1)
		// Served without the page's CSP, which would block this script.
		w.Header().Set("Content-Type", "text/html; charset=utf-8")
		_, _ = io.WriteString(w, page)
	})
	mux.HandleFunc("/", func(w http.ResponseWriter, r *http.Request) {
		if r.URL.Path == "/" {
			mu.Lock()
			queries = append(queries, r.URL.RawQuery)
			mu.Unlock()
		}
		h.ServeHTTP(w, r)
	})
	ts := httptest.NewServer(mux)
	defer ts.Close()

	t.Run("submit session form", func(t *testing.T) {
		// The virtual time budget lets the page's script run and the
		// browser follow the form submission before the DOM is dumped.
		dom := runChromium(t, bin, "--virtual-time-budget=10000", "--dump-dom", ts.URL+"/test/submit")
		mu.Lock()
		got := append([]string(nil), queries...)
		mu.Unlock()
		if len(got) != 1 || got[0] != "session=A&k=3" {
			t.Fatalf("browser's form submission asked / for %q, want [session=A&k=3]", got)
		}
		for _, want := range []string{
			`id="events-applied">173<`, `id="events-rejected">0<`, `id="consumer-lag">0<`, `id="items">6<`,
			`class="answer-source">blend<`, `class="answer-known">1<`,
			`name="session" value="A"`,
		} {
			if !strings.Contains(dom, want) {
				t.Errorf("DOM lacks %q", want)
			}
		}
		// The hand-computed answer of TestPageHandler: B first (3.082),
		// then C (1.582), with its per-signal features.
		rows := tableAfter(dom, `<div id="answer">`)
		if len(rows) != 3 || rows[0][1] != "B" || rows[0][2] != "3.082" || rows[1][1] != "C" || rows[1][2] != "1.582" {
			t.Fatalf("answer rows in the DOM: %q", rows)
		}
		if len(rows[0]) != 3+4 { // #, item, score, markov, sr, iknn, pop
			t.Errorf("answer row has %d cells, want 7: %q", len(rows[0]), rows[0])
		}
		if strings.Contains(dom, "<script") {
			t.Error("the submit script outlived its page")
		}
	})

	t.Run("hostile ids stay text", func(t *testing.T) {
		dom := runChromium(t, bin, "--dump-dom", ts.URL+"/?session="+url.QueryEscape(hostileA))
		// The browser's parser made no element of either id: not in the
		// popular list, the answer, the links or the form's value.
		for _, bad := range []string{"<script", "<img"} {
			if strings.Contains(dom, bad) {
				t.Errorf("DOM holds a %s element", bad)
			}
		}
		rows := tableAfter(dom, `<div id="answer">`)
		if len(rows) == 0 || rows[0][1] != hostileB {
			t.Fatalf("answer rows in the DOM: %q, want %q first", rows, hostileB)
		}
		found := 0
		for _, r := range tableAfter(dom, `id="popular"`) {
			if r[1] == hostileA || r[1] == hostileB {
				found++
			}
		}
		if found != 2 {
			t.Errorf("popular list in the DOM shows %d of the 2 hostile ids as text", found)
		}
	})

	t.Run("neighbours link", func(t *testing.T) {
		dom := runChromium(t, bin, "--dump-dom", ts.URL+"/?item=A&k=3")
		rows := tableAfter(dom, `id="neighbors"`)
		if len(rows) != 3 || rows[2][0] != "D" || rows[2][1] != "0.405" {
			t.Fatalf("neighbour rows in the DOM: %q", rows)
		}
	})

	// WAYMARK_PAGE_SCREENSHOT=/path/page.png keeps a picture of the page
	// with an answer, for a human to look at.
	if shot := os.Getenv("WAYMARK_PAGE_SCREENSHOT"); shot != "" {
		runChromium(t, bin, "--window-size=1200,1500", "--hide-scrollbars", "--screenshot="+shot, ts.URL+"/?session=A,B&item=A&k=5")
		if fi, err := os.Stat(shot); err != nil || fi.Size() == 0 {
			t.Errorf("screenshot %s not written: %v", shot, err)
		}
	}
}
