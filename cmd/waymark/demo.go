package main

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"net/http"
	"os"
	"sort"
	"strings"
	"time"

	"waymark/cmd/waymark/internal/demoshop"
	"waymark/session"
	"waymark/stream"
)

func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("demo", flag.ContinueOnError)
	keep := fs.Bool("keep", false, "keep the service running after the tour (Ctrl-C stops it)")
	httpAddr := fs.String("http", "127.0.0.1:0", "HTTP listen `address` (port 0 picks a free one)")
	natsAddr := fs.String("nats-listen", "127.0.0.1:-1", "embedded NATS listen `address` (port -1 picks a free one)")
	days := fs.Int("days", 3, "simulated `days` of traffic")
	sessions := fs.Int("sessions", 1500, "visitor `sessions` per simulated day")
	seed := fs.Uint64("seed", 1, "random `seed` of the scenario")
	if code, ok := parseFlags(fs, demoUsage, args, stdout, stderr); !ok {
		return code
	}
	if *days < 1 || *sessions < 10 {
		return usageError(stderr, "demo", "--days must be >= 1 and --sessions >= 10")
	}
	if err := demo(ctx, stdout, stderr, *keep, *httpAddr, *natsAddr, demoshop.Options{Seed: *seed, Days: *days, Sessions: *sessions}); err != nil {
		fmt.Fprintln(stderr, "waymark demo:", err)
		return 1
	}
	return 0
}

const demoUsage = `usage: waymark demo [flags]

Run an invented shop end to end: generate a catalogue and visitor sessions, start the
service on the embedded NATS server in a temporary folder, publish the stream, and show
what visitors get. The first run compiles the program (go run), which takes a few minutes
with empty Go caches.

flags:
`

func demo(ctx context.Context, out, stderr io.Writer, keep bool, httpAddr, natsAddr string, so demoshop.Options) error {
	sc := demoshop.Generate(so)
	dir, err := os.MkdirTemp("", "waymark-demo-")
	if err != nil {
		return err
	}
	defer os.RemoveAll(dir)
	opts := session.DefaultServiceOptions()
	opts.DataDir, opts.HTTPAddr, opts.NATSListen = dir, httpAddr, natsAddr
	svc, err := session.Open(ctx, opts)
	if err != nil {
		return err
	}
	defer svc.Shutdown(context.Background())
	base := "http://" + svc.HTTPAddr()
	cats := map[string]bool{}
	for _, it := range sc.Items {
		cats[it.Category] = true
	}
	fmt.Fprintf(out, "waymark demo: Quillmoor, an invented shop for camping and kitchen goods\n\n")
	fmt.Fprintf(out, "  catalogue  %d items in %d categories; %d new items launch at %s\n", len(sc.Items), len(cats), len(sc.Launched), sc.Launched[0].Launch.Format("Mon 15:04"))
	fmt.Fprintf(out, "  traffic    %d simulated days, %d visitor sessions, %d clicks\n", so.Days, so.Days*so.Sessions, len(sc.Events))
	fmt.Fprintf(out, "  service    %s  (embedded NATS at %s, data in %s)\n\n", base, svc.NATSURL(), dir)

	start := time.Now()
	if err := publishScenario(ctx, svc.Bus(), sc); err != nil {
		return err
	}
	if err := waitApplied(ctx, svc.Engine(), uint64(len(sc.Events)), time.Minute); err != nil {
		return err
	}
	fmt.Fprintf(out, "Published the stream and learned all %d clicks in %s.\n\n", len(sc.Events), time.Since(start).Round(time.Millisecond))

	c := &client{base: base}
	first := topItem(c, "camping/tents", sc)
	path := []string{first}
	for i := 0; i < 3; i++ {
		res, err := c.next(path, 5)
		if err != nil {
			return err
		}
		fmt.Fprintf(out, "A visitor who clicked %s gets (answered by %s):\n", strings.Join(path, " > "), res.Source)
		printItems(out, res.Items)
		if len(res.Items) == 0 {
			break
		}
		path = append(path, res.Items[0].Item)
	}
	fmt.Fprintln(out, "Each feature is one signal's score divided by its best for this query (0 to 1); the score\n"+
		"combines them with the weights of the mixture the default blend learned from these clicks\n"+
		"(content's weight shrinking as items gather clicks): it ranks items within one answer, it is\n"+
		"not a probability.")
	fmt.Fprintln(out)
	var fresh session.NextResult
	if err := c.get("/v1/sessions/first-time-visitor/next?k=5", &fresh); err != nil {
		return err
	}
	fmt.Fprintf(out, "A brand-new visitor with no clicks gets the popular items (answered by %s):\n", fresh.Source)
	printItems(out, fresh.Items)

	launched := sc.Launched[0]
	var nb struct {
		Neighbors []session.Neighbor `json:"neighbors"`
	}
	if err := c.get("/v1/items/"+launched.ID+"/neighbors?k=5", &nb); err != nil {
		return err
	}
	clicks := 0
	for _, ev := range sc.Events {
		if ev.Item == launched.ID {
			clicks++
		}
	}
	fmt.Fprintf(out, "The item %s launched at %s and drew %d clicks in the simulated days after; its co-visited neighbours:\n", launched.ID, launched.Launch.Format("Mon 15:04"), clicks)
	for i, n := range nb.Neighbors {
		fmt.Fprintf(out, "  %d. %-24s cosine %.3f\n", i+1, n.Item, n.Score)
	}
	shown := 0
	for _, it := range sc.Items {
		if it.Category != launched.Category || it.ID == launched.ID {
			continue
		}
		res, err := c.next([]string{it.ID}, 5)
		if err != nil {
			return err
		}
		for _, r := range res.Items {
			if r.Item == launched.ID {
				shown++
			}
		}
	}
	fmt.Fprintf(out, "It is now among the top 5 next items after %d of the other %d items in %s.\n\n", shown, len(sc.Items)/len(cats)-1, launched.Category)

	// An item launched this minute: a catalogue record, no clicks yet.
	brandNew := stream.ItemRecord{Item: "tent-storm-new", Attrs: map[string][]string{
		"category": {launched.Category}, "tags": {"storm", "tent", "shelter"}, "title": {"new storm tent"}}}
	if err := svc.Bus().PublishRaw(ctx, svc.Bus().Options().CatalogSubject, [][]byte{brandNew.AppendJSON(nil)}); err != nil {
		return err
	}
	if err := waitCatalog(ctx, svc.Engine(), uint64(len(sc.Catalog)+1), 10*time.Second); err != nil {
		return err
	}
	res, err := c.next([]string{brandNew.Item}, 5)
	if err != nil {
		return err
	}
	fmt.Fprintf(out, "%s was added to the catalogue a moment ago and nobody has clicked it; a visitor who lands on it gets:\n", brandNew.Item)
	printItems(out, res.Items)
	beside := 0
	for _, it := range sc.Items {
		if it.Category != launched.Category {
			continue
		}
		r, err := c.next([]string{it.ID}, 10)
		if err != nil {
			return err
		}
		for _, x := range r.Items {
			if x.Item == brandNew.Item {
				beside++
			}
		}
	}
	fmt.Fprintf(out, "From its catalogue record alone it is among the top 10 next items of %d of the %d other tents.\n\n", beside, len(sc.Items)/len(cats))

	var st session.Stats
	if err := c.get("/v1/stats", &st); err != nil {
		return err
	}
	fmt.Fprintf(out, "Stats: %d events and %d catalogue records applied, %d items, %d sessions tracked.\n", st.EventsApplied, st.CatalogApplied, st.Items, st.SessionsActive)
	if !keep {
		fmt.Fprintln(out, "Run 'waymark demo --keep' to keep the service running and try it with curl.")
		return nil
	}
	fmt.Fprintf(out, "\nThe service keeps running at %s until Ctrl-C. Try:\n", base)
	fmt.Fprintf(out, "  curl -s %s/v1/sessions/%s/next?k=5\n", base, sc.Events[len(sc.Events)-1].Session)
	fmt.Fprintf(out, "  curl -s -d '{\"items\":[\"%s\"],\"k\":5}' %s/v1/next\n", first, base)
	fmt.Fprintf(out, "  curl -s %s/metrics | grep ^waymark_\n", base)
	select {
	case <-ctx.Done():
	case err := <-svc.Err():
		return err
	}
	return nil
}

// publishScenario publishes catalogue records and clicks interleaved in
// event-time order, so an item's record precedes its first click.
func publishScenario(ctx context.Context, bus *stream.Bus, sc *demoshop.Scenario) error {
	cat := append([]demoshop.Timed(nil), sc.Catalog...)
	sort.SliceStable(cat, func(i, j int) bool { return cat[i].At.Before(cat[j].At) })
	evs := sc.Events
	for len(cat) > 0 || len(evs) > 0 {
		if len(cat) > 0 && (len(evs) == 0 || cat[0].At.UnixMilli() <= evs[0].TS) {
			var recs [][]byte
			at := cat[0].At
			for len(cat) > 0 && cat[0].At.Equal(at) {
				recs = append(recs, cat[0].Record.AppendJSON(nil))
				cat = cat[1:]
			}
			if err := bus.PublishRaw(ctx, bus.Options().CatalogSubject, recs); err != nil {
				return err
			}
			continue
		}
		n := len(evs)
		if len(cat) > 0 {
			n = sort.Search(len(evs), func(i int) bool { return evs[i].TS >= cat[0].At.UnixMilli() })
		}
		if err := bus.PublishEvents(ctx, evs[:n]); err != nil {
			return err
		}
		evs = evs[n:]
	}
	return nil
}

func waitApplied(ctx context.Context, eng *session.Engine, n uint64, limit time.Duration) error {
	deadline := time.Now().Add(limit)
	for eng.Stats().EventsApplied < n {
		if time.Now().After(deadline) {
			return fmt.Errorf("only %d of %d events applied after %s", eng.Stats().EventsApplied, n, limit)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(50 * time.Millisecond):
		}
	}
	return nil
}

func waitCatalog(ctx context.Context, eng *session.Engine, n uint64, limit time.Duration) error {
	deadline := time.Now().Add(limit)
	for eng.Stats().CatalogApplied < n {
		if time.Now().After(deadline) {
			return fmt.Errorf("only %d of %d catalogue records applied after %s", eng.Stats().CatalogApplied, n, limit)
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(20 * time.Millisecond):
		}
	}
	return nil
}

func topItem(c *client, category string, sc *demoshop.Scenario) string {
	counts := map[string]int{}
	in := map[string]bool{}
	for _, it := range sc.Items {
		in[it.ID] = it.Category == category
	}
	for _, ev := range sc.Events {
		if in[ev.Item] {
			counts[ev.Item]++
		}
	}
	best, n := "", -1
	for id, k := range counts {
		if k > n || (k == n && id < best) {
			best, n = id, k
		}
	}
	return best
}

func printItems(out io.Writer, items []session.Recommendation) {
	for i, it := range items {
		names := make([]string, 0, len(it.Features))
		for k := range it.Features {
			names = append(names, k)
		}
		sort.Strings(names)
		parts := make([]string, len(names))
		for j, k := range names {
			parts[j] = fmt.Sprintf("%s %.2f", k, it.Features[k])
		}
		fmt.Fprintf(out, "  %d. %-24s %.3f  (%s)\n", i+1, it.Item, it.Score, strings.Join(parts, ", "))
	}
	fmt.Fprintln(out)
}

// client talks to the demo's own service over real HTTP, as a user would.
type client struct{ base string }

func (c *client) get(path string, v any) error {
	resp, err := http.Get(c.base + path)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		b, _ := io.ReadAll(resp.Body)
		return fmt.Errorf("GET %s: %s: %s", path, resp.Status, b)
	}
	return json.NewDecoder(resp.Body).Decode(v)
}

func (c *client) next(items []string, k int) (session.NextResult, error) {
	var res session.NextResult
	body, _ := json.Marshal(map[string]any{"items": items, "k": k})
	resp, err := http.Post(c.base+"/v1/next", "application/json", bytes.NewReader(body))
	if err != nil {
		return res, err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		b, _ := io.ReadAll(resp.Body)
		return res, fmt.Errorf("POST /v1/next: %s: %s", resp.Status, b)
	}
	return res, json.NewDecoder(resp.Body).Decode(&res)
}
