package session

import (
	"io"
	"net/http"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"
)

// TestBootstrapFromFile: a snapshot downloaded from a running service (what
// `waymark snapshot --out FILE` writes) starts a new replica's empty data
// folder through BootstrapFile (`serve --bootstrap=FILE`): the replica holds
// the state at once, resumes after the snapshot's sequence, and answers as
// the original does. Before issue 16 nothing could load such a file.
func TestBootstrapFromFile(t *testing.T) {
	a := newTestService(t, t.TempDir())
	defer shutdown(t, a)
	base := "http://" + a.HTTPAddr()
	if code := doJSON(t, "POST", base+"/v1/events", workedEvents(), nil); code != 200 {
		t.Fatalf("events: %d", code)
	}
	waitFor(t, "events applied", 20*time.Second, func() bool { return a.Engine().Stats().EventsApplied == 171 })
	// The snapshot holds what the store committed; wait until that is
	// everything, so the new replica has nothing left to read.
	waitFor(t, "a commit of every event", 20*time.Second, func() bool {
		cp, err := a.st.Checkpoint()
		return err == nil && cp.Seq == a.Engine().Stats().LastSequence
	})

	resp, err := http.Post(base+"/v1/admin/snapshot?to=download", "", nil)
	if err != nil || resp.StatusCode != 200 {
		t.Fatalf("download: %v %v", resp, err)
	}
	file := filepath.Join(t.TempDir(), "waymark.snapshot")
	f, err := os.Create(file)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := io.Copy(f, resp.Body); err != nil {
		t.Fatal(err)
	}
	resp.Body.Close()
	f.Close()
	if seq := resp.Header.Get("Waymark-Seq"); seq != "171" {
		t.Fatalf("snapshot after sequence %s, want 171 (the events posted)", seq)
	}

	b := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Bus.URL = a.NATSURL(); o.BootstrapFile = file })
	defer shutdown(t, b)
	if got := b.Engine().ResumeSeq(); got != a.Engine().ResumeSeq() {
		t.Errorf("bootstrapped replica resumes at %d, the original at %d", got, a.Engine().ResumeSeq())
	}
	var ra, rb NextResult
	doJSON(t, "POST", base+"/v1/next", `{"items":["A"],"k":3}`, &ra)
	doJSON(t, "POST", "http://"+b.HTTPAddr()+"/v1/next", `{"items":["A"],"k":3}`, &rb)
	if len(ra.Items) == 0 || !reflect.DeepEqual(ra.Items, rb.Items) {
		t.Errorf("answers differ:\noriginal     %+v\nbootstrapped %+v", ra.Items, rb.Items)
	}

	// A file that is not there is a configuration error, found before the
	// data folder is created.
	dir := filepath.Join(t.TempDir(), "data")
	o := DefaultServiceOptions()
	o.DataDir, o.BootstrapFile = dir, filepath.Join(t.TempDir(), "missing")
	if _, err := Open(t.Context(), o); err == nil || !strings.Contains(err.Error(), "BootstrapFile") {
		t.Errorf("missing file: %v", err)
	}
	if _, err := os.Stat(dir); !os.IsNotExist(err) {
		t.Errorf("data folder created for a missing bootstrap file (stat: %v)", err)
	}
}
