package main

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"maps"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"sort"
	"strings"
	"testing"
	"time"

	"gopkg.in/yaml.v3"

	"waymark/cmd/waymark/internal/flagconf"
	"waymark/session"
)

// The deploy folder holds no code and docker is not on the build machine,
// so these tests are what keeps its files honest: they parse, they agree
// with each other and with deploy/README.md, and they name only flags and
// metrics that exist.

const (
	deployDir = "../../deploy"
	repoRoot  = "../.."
)

// deployFiles lists every file under deploy/, as slash paths relative to it.
func deployFiles(t *testing.T) []string {
	t.Helper()
	var out []string
	err := filepath.WalkDir(deployDir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, err := filepath.Rel(deployDir, p)
		out = append(out, filepath.ToSlash(rel))
		return err
	})
	if err != nil {
		t.Fatalf("walk %s: %v", deployDir, err)
	}
	if len(out) == 0 {
		t.Fatalf("%s is empty", deployDir)
	}
	return out
}

func readDeploy(t *testing.T, rel string) []byte {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(deployDir, rel))
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// yamlDocs decodes every document of a YAML stream.
func yamlDocs(b []byte) ([]map[string]any, error) {
	dec := yaml.NewDecoder(bytes.NewReader(b))
	var docs []map[string]any
	for {
		var doc map[string]any
		err := dec.Decode(&doc)
		if errors.Is(err, io.EOF) {
			return docs, nil
		}
		if err != nil {
			return nil, fmt.Errorf("document %d: %w", len(docs)+1, err)
		}
		if doc != nil {
			docs = append(docs, doc)
		}
	}
}

func TestDeployFilesParse(t *testing.T) {
	n := 0
	for _, rel := range deployFiles(t) {
		ext := filepath.Ext(rel)
		if ext != ".yaml" && ext != ".yml" && ext != ".json" {
			continue
		}
		n++
		t.Run(rel, func(t *testing.T) {
			b := readDeploy(t, rel)
			if ext == ".json" {
				var v map[string]any
				dec := json.NewDecoder(bytes.NewReader(b))
				if err := dec.Decode(&v); err != nil {
					t.Fatalf("JSON: %v", err)
				}
				if dec.More() {
					t.Fatal("JSON: more than one value")
				}
				if len(v) == 0 {
					t.Fatal("JSON: empty object")
				}
				return
			}
			docs, err := yamlDocs(b)
			if err != nil {
				t.Fatalf("YAML: %v", err)
			}
			if len(docs) == 0 {
				t.Fatal("YAML: no document")
			}
		})
	}
	if n < 8 {
		t.Errorf("only %d YAML/JSON files under %s", n, deployDir)
	}
}

func TestDeployReadmeDescribesEveryFile(t *testing.T) {
	readme := string(readDeploy(t, "README.md"))
	for _, rel := range deployFiles(t) {
		if rel != "README.md" && !strings.Contains(readme, "`"+rel+"`") {
			t.Errorf("deploy/README.md does not describe `%s`", rel)
		}
	}
	if !strings.Contains(readme, "not available on the build machine") {
		t.Error("deploy/README.md must say docker is not available on the build machine")
	}
}

type composeFile struct {
	Services map[string]struct {
		Image   string   `yaml:"image"`
		Build   any      `yaml:"build"`
		Command []string `yaml:"command"`
		Ports   []string `yaml:"ports"`
		Volumes []string `yaml:"volumes"`
	} `yaml:"services"`
	Volumes map[string]any `yaml:"volumes"`
}

// readmeComposeTable returns service → published ports from the table
// under "## Compose services and ports" in deploy/README.md.
func readmeComposeTable(t *testing.T) map[string][]string {
	t.Helper()
	readme := string(readDeploy(t, "README.md"))
	const head = "## Compose services and ports"
	i := strings.Index(readme, head)
	if i < 0 {
		t.Fatalf("deploy/README.md lacks %q", head)
	}
	sec := readme[i+len(head):]
	if j := strings.Index(sec, "\n#"); j >= 0 {
		sec = sec[:j]
	}
	nameRe := regexp.MustCompile("^`([a-z0-9-]+)`$")
	portRe := regexp.MustCompile(`\b\d+:\d+\b`)
	out := map[string][]string{}
	for _, line := range strings.Split(sec, "\n") {
		cells := strings.Split(strings.Trim(strings.TrimSpace(line), "|"), "|")
		if len(cells) < 4 {
			continue
		}
		m := nameRe.FindStringSubmatch(strings.TrimSpace(cells[0]))
		if m == nil {
			continue
		}
		ports := portRe.FindAllString(cells[2], -1)
		sort.Strings(ports)
		out[m[1]] = ports
	}
	if len(out) == 0 {
		t.Fatal("no service rows in the compose table of deploy/README.md")
	}
	return out
}

// flagValue returns the value after flag in args ("--flag v" or "--flag=v").
func flagValue(args []string, flag string) (string, bool) {
	for i, a := range args {
		if a == flag && i+1 < len(args) {
			return args[i+1], true
		}
		if v, ok := strings.CutPrefix(a, flag+"="); ok {
			return v, true
		}
	}
	return "", false
}

func loadCompose(t *testing.T) composeFile {
	t.Helper()
	var c composeFile
	if err := yaml.Unmarshal(readDeploy(t, "compose.yaml"), &c); err != nil {
		t.Fatalf("compose.yaml: %v", err)
	}
	return c
}

func TestDeployComposeMatchesReadme(t *testing.T) {
	c := loadCompose(t)
	doc := readmeComposeTable(t)
	var names []string
	for name, svc := range c.Services {
		names = append(names, name)
		want, ok := doc[name]
		if !ok {
			t.Errorf("compose service %s is not in the README table", name)
			continue
		}
		got := slices.Clone(svc.Ports)
		sort.Strings(got)
		if !slices.Equal(got, want) {
			t.Errorf("service %s: compose publishes %v, README says %v", name, got, want)
		}
	}
	for name := range doc {
		if _, ok := c.Services[name]; !ok {
			t.Errorf("README table lists %s, which compose does not define", name)
		}
	}
	if len(names) != 6 {
		t.Errorf("compose services %v: want three NATS nodes, two replicas and Prometheus", names)
	}
}

func TestDeployComposeTopology(t *testing.T) {
	c := loadCompose(t)
	var natsNodes, replicas []string
	for name, svc := range c.Services {
		switch {
		case strings.HasPrefix(svc.Image, "nats:"):
			natsNodes = append(natsNodes, name)
		case svc.Image == "waymark:local":
			replicas = append(replicas, name)
		}
	}
	sort.Strings(natsNodes)
	sort.Strings(replicas)
	if !slices.Equal(natsNodes, []string{"nats-1", "nats-2", "nats-3"}) || !slices.Equal(replicas, []string{"waymark-1", "waymark-2"}) {
		t.Fatalf("NATS nodes %v, replicas %v", natsNodes, replicas)
	}
	urls := func(port string) []string {
		var u []string
		for _, n := range natsNodes {
			u = append(u, "nats://"+n+":"+port)
		}
		return u
	}
	for _, n := range natsNodes {
		cmd := c.Services[n].Command
		if !slices.Contains(cmd, "--jetstream") {
			t.Errorf("%s: JetStream not enabled: %v", n, cmd)
		}
		if v, _ := flagValue(cmd, "--name"); v != n {
			t.Errorf("%s: --name %q", n, v)
		}
		routes, _ := flagValue(cmd, "--routes")
		got := strings.Split(routes, ",")
		sort.Strings(got)
		if !slices.Equal(got, urls("6222")) {
			t.Errorf("%s: routes %v, want %v", n, got, urls("6222"))
		}
	}
	dataVolumes := map[string]string{}
	for _, r := range replicas {
		svc := c.Services[r]
		nats, _ := flagValue(svc.Command, "--nats")
		got := strings.Split(nats, ",")
		sort.Strings(got)
		if !slices.Equal(got, urls("4222")) {
			t.Errorf("%s: --nats %v, want every node %v", r, got, urls("4222"))
		}
		if svc.Build == nil {
			t.Errorf("%s: no build section", r)
		}
		if err := newServeFlags("serve", io.Discard).fs.Parse(svc.Command); err != nil {
			t.Errorf("%s: command %v is not serve's flags: %v", r, svc.Command, err)
		}
		for _, v := range svc.Volumes {
			src, dst, _ := strings.Cut(v, ":")
			if strings.HasPrefix(dst, "/var/lib/waymark") {
				if other, dup := dataVolumes[src]; dup {
					t.Errorf("%s and %s share data volume %s", r, other, src)
				}
				dataVolumes[src] = r
				if _, ok := c.Volumes[src]; !ok {
					t.Errorf("%s: volume %s not declared", r, src)
				}
			}
			if src == "./waymark.json" {
				if _, err := os.Stat(filepath.Join(deployDir, "waymark.json")); err != nil {
					t.Errorf("%s mounts ./waymark.json: %v", r, err)
				}
			}
		}
	}
	if len(dataVolumes) != len(replicas) {
		t.Errorf("data volumes %v: each replica needs its own", dataVolumes)
	}

	// Prometheus scrapes exactly the replicas, on the port they listen on,
	// and loads the rule file compose mounts.
	var prom struct {
		RuleFiles     []string `yaml:"rule_files"`
		ScrapeConfigs []struct {
			JobName       string `yaml:"job_name"`
			StaticConfigs []struct {
				Targets []string `yaml:"targets"`
			} `yaml:"static_configs"`
		} `yaml:"scrape_configs"`
	}
	if err := yaml.Unmarshal(readDeploy(t, "prometheus.yml"), &prom); err != nil {
		t.Fatal(err)
	}
	var targets []string
	for _, sc := range prom.ScrapeConfigs {
		if sc.JobName == "waymark" {
			for _, st := range sc.StaticConfigs {
				targets = append(targets, st.Targets...)
			}
		}
	}
	sort.Strings(targets)
	if want := []string{"waymark-1:8080", "waymark-2:8080"}; !slices.Equal(targets, want) {
		t.Errorf("prometheus.yml job waymark targets %v, want %v", targets, want)
	}
	mounts := strings.Join(c.Services["prometheus"].Volumes, " ")
	for _, rf := range prom.RuleFiles {
		if !strings.Contains(mounts, "./"+filepath.Base(rf)+":"+rf) {
			t.Errorf("rule file %s is not mounted by the prometheus service (%s)", rf, mounts)
		}
	}
	if len(prom.RuleFiles) == 0 {
		t.Error("prometheus.yml loads no rule file")
	}

	// The NATS image follows the server version the code is tested with.
	gomod, err := os.ReadFile(filepath.Join(repoRoot, "go.mod"))
	if err != nil {
		t.Fatal(err)
	}
	m := regexp.MustCompile(`github.com/nats-io/nats-server/v2 v(\d+\.\d+)\.`).FindSubmatch(gomod)
	if m == nil {
		t.Fatal("go.mod: no nats-server version")
	}
	for _, n := range natsNodes {
		if img := c.Services[n].Image; !strings.HasPrefix(img, "nats:"+string(m[1])) {
			t.Errorf("%s: image %s, go.mod has nats-server %s", n, img, m[1])
		}
	}
}

// serveConfigs returns every serve config file under deploy/: the example
// file and each *.json entry of a ConfigMap, by a name for messages.
func serveConfigs(t *testing.T) map[string][]byte {
	t.Helper()
	out := map[string][]byte{"waymark.json": readDeploy(t, "waymark.json")}
	for _, rel := range deployFiles(t) {
		if !strings.HasPrefix(rel, "k8s/") || filepath.Ext(rel) != ".yaml" {
			continue
		}
		docs, err := yamlDocs(readDeploy(t, rel))
		if err != nil {
			t.Fatalf("%s: %v", rel, err)
		}
		for _, d := range docs {
			if d["kind"] != "ConfigMap" {
				continue
			}
			data, _ := d["data"].(map[string]any)
			for k, v := range data {
				if s, ok := v.(string); ok && strings.HasSuffix(k, ".json") {
					out[rel+":"+k] = []byte(s)
				}
			}
		}
	}
	if len(out) < 2 {
		t.Errorf("no ConfigMap with a config file under deploy/k8s: %v", out)
	}
	return out
}

func TestDeployConfigKeysAreServeFlags(t *testing.T) {
	for name, b := range serveConfigs(t) {
		t.Run(name, func(t *testing.T) {
			var keys map[string]any
			if err := json.Unmarshal(b, &keys); err != nil {
				t.Fatal(err)
			}
			f := newServeFlags("serve", io.Discard)
			for k := range keys {
				if f.fs.Lookup(k) == nil {
					t.Errorf("key %q is not a flag of waymark serve", k)
				}
				if k == "auth-token" {
					t.Error("a config file in deploy/ holds the auth token; it belongs in the environment")
				}
			}
			// The values must also parse as their flags do.
			path := filepath.Join(t.TempDir(), "waymark.json")
			if err := os.WriteFile(path, b, 0o600); err != nil {
				t.Fatal(err)
			}
			noEnv := func(string) (string, bool) { return "", false }
			if err := flagconf.Apply(f.fs, "WAYMARK_", path, noEnv); err != nil {
				t.Fatalf("apply: %v", err)
			}
			if _, err := f.options(slog.New(slog.DiscardHandler)); err != nil {
				t.Fatalf("options: %v", err)
			}
		})
	}
}

func TestDeployDockerfile(t *testing.T) {
	df := string(readDeploy(t, "Dockerfile"))
	gomod, err := os.ReadFile(filepath.Join(repoRoot, "go.mod"))
	if err != nil {
		t.Fatal(err)
	}
	gov := regexp.MustCompile(`(?m)^go (\d+\.\d+)`).FindSubmatch(gomod)
	if gov == nil {
		t.Fatal("go.mod: no go directive")
	}
	var froms, users []string
	var entry, expose string
	sc := bufio.NewScanner(strings.NewReader(df))
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		instr, rest, _ := strings.Cut(line, " ")
		switch strings.ToUpper(instr) {
		case "FROM":
			froms = append(froms, rest)
			users = nil // USER applies to the stage it is in
		case "USER":
			users = append(users, strings.TrimSpace(rest))
		case "ENTRYPOINT":
			entry = rest
		case "EXPOSE":
			expose += " " + rest
		}
	}
	if len(froms) < 2 {
		t.Fatalf("want a multi-stage build, FROM lines %q", froms)
	}
	if !strings.HasPrefix(froms[0], "golang:"+string(gov[1])+" ") && froms[0] != "golang:"+string(gov[1]) {
		t.Errorf("build stage %q, want golang:%s (go.mod)", froms[0], gov[1])
	}
	if !strings.Contains(df, "CGO_ENABLED=0") || !strings.Contains(df, "./cmd/waymark") {
		t.Error("the build must be static (CGO_ENABLED=0) and of ./cmd/waymark")
	}
	if len(users) == 0 {
		t.Fatal("the runtime stage sets no USER")
	}
	if u := users[len(users)-1]; u == "root" || u == "0" || strings.HasPrefix(u, "0:") {
		t.Errorf("runtime USER %q is root", u)
	}
	if !strings.Contains(" "+expose+" ", " 8080 ") {
		t.Errorf("EXPOSE%s lacks 8080", expose)
	}
	var args []string
	if err := json.Unmarshal([]byte(entry), &args); err != nil {
		t.Fatalf("ENTRYPOINT %q is not an exec-form array: %v", entry, err)
	}
	if len(args) < 2 || args[1] != "serve" {
		t.Fatalf("ENTRYPOINT %q does not run waymark serve", args)
	}
	if v, _ := flagValue(args, "--http"); v != "0.0.0.0:8080" {
		t.Errorf("ENTRYPOINT --http %q, want 0.0.0.0:8080", v)
	}
	f := newServeFlags("serve", io.Discard)
	if err := f.fs.Parse(args[2:]); err != nil {
		t.Errorf("ENTRYPOINT flags do not parse: %v", err)
	}
}

// k8sDocs decodes every manifest under deploy/k8s by kind/name.
func k8sDocs(t *testing.T) map[string]map[string]any {
	t.Helper()
	out := map[string]map[string]any{}
	for _, rel := range deployFiles(t) {
		if !strings.HasPrefix(rel, "k8s/") || rel == "k8s/kustomization.yaml" {
			continue
		}
		docs, err := yamlDocs(readDeploy(t, rel))
		if err != nil {
			t.Fatalf("%s: %v", rel, err)
		}
		for _, d := range docs {
			md, _ := d["metadata"].(map[string]any)
			out[fmt.Sprint(d["kind"], "/", md["name"])] = d
		}
	}
	return out
}

// dig walks nested maps and lists by key or index.
func dig(v any, path ...any) any {
	for _, p := range path {
		switch k := p.(type) {
		case string:
			m, _ := v.(map[string]any)
			v = m[k]
		case int:
			l, _ := v.([]any)
			if k >= len(l) {
				return nil
			}
			v = l[k]
		}
	}
	return v
}

func asList(v any) []any {
	l, _ := v.([]any)
	return l
}

func stringList(v any) []string {
	l := asList(v)
	out := make([]string, 0, len(l))
	for _, x := range l {
		out = append(out, fmt.Sprint(x))
	}
	return out
}

func TestDeployKubernetesSidecar(t *testing.T) {
	docs := k8sDocs(t)
	var kust struct {
		Resources []string `yaml:"resources"`
	}
	if err := yaml.Unmarshal(readDeploy(t, "k8s/kustomization.yaml"), &kust); err != nil {
		t.Fatal(err)
	}
	var manifests []string
	for _, rel := range deployFiles(t) {
		if strings.HasPrefix(rel, "k8s/") && rel != "k8s/kustomization.yaml" {
			manifests = append(manifests, strings.TrimPrefix(rel, "k8s/"))
		}
	}
	sort.Strings(kust.Resources)
	if !slices.Equal(kust.Resources, manifests) {
		t.Errorf("kustomization resources %v, manifests %v", kust.Resources, manifests)
	}

	dep := docs["Deployment/ranker"]
	if dep == nil {
		t.Fatalf("no Deployment/ranker among %v", slices.Sorted(maps.Keys(docs)))
	}
	pod := dig(dep, "spec", "template", "spec")
	containers := asList(dig(pod, "containers"))
	byName := map[string]any{}
	for _, c := range containers {
		byName[fmt.Sprint(dig(c, "name"))] = c
	}
	if len(containers) != 2 || byName["ranker"] == nil || byName["waymark"] == nil {
		t.Fatalf("pod containers %v: want ranker and the waymark sidecar", slices.Sorted(maps.Keys(byName)))
	}
	w := byName["waymark"]
	for probe, path := range map[string]string{"readinessProbe": "/readyz", "livenessProbe": "/healthz", "startupProbe": "/healthz"} {
		if got := dig(w, probe, "httpGet", "path"); got != path {
			t.Errorf("waymark %s path %v, want %s", probe, got, path)
		}
		if port := dig(w, probe, "httpGet", "port"); port != "waymark" && port != 8080 {
			t.Errorf("waymark %s port %v", probe, port)
		}
	}
	if dig(w, "ports", 0, "containerPort") != 8080 {
		t.Errorf("waymark containerPort %v, want 8080 (the image's --http)", dig(w, "ports", 0, "containerPort"))
	}
	for _, c := range []string{"ranker", "waymark"} {
		if dig(byName[c], "resources", "requests", "memory") == nil || dig(byName[c], "resources", "limits", "memory") == nil {
			t.Errorf("container %s lacks memory requests and limits", c)
		}
	}
	// The sidecar's flags must be serve's.
	args := stringList(dig(w, "args"))
	if err := newServeFlags("serve", io.Discard).fs.Parse(args); err != nil {
		t.Errorf("waymark args %v: %v", args, err)
	}
	// The config file is mounted where --config looks for it.
	cfgPath, _ := flagValue(args, "--config")
	mounted := false
	for _, m := range asList(dig(w, "volumeMounts")) {
		vol := fmt.Sprint(dig(m, "name"))
		for _, v := range asList(dig(pod, "volumes")) {
			if dig(v, "name") == vol && dig(v, "configMap", "name") != nil {
				cm := docs["ConfigMap/"+fmt.Sprint(dig(v, "configMap", "name"))]
				key := strings.TrimPrefix(cfgPath, fmt.Sprint(dig(m, "mountPath"))+"/")
				mounted = mounted || dig(cm, "data", key) != nil
			}
		}
	}
	if !mounted {
		t.Errorf("--config %s is not a key of a mounted ConfigMap", cfgPath)
	}

	// The snapshot job reaches waymark through the Service's port.
	svc := docs["Service/ranker"]
	ports := map[string]bool{}
	for _, p := range asList(dig(svc, "spec", "ports")) {
		if dig(p, "targetPort") == "waymark" {
			ports[fmt.Sprintf("http://%s:%v", dig(svc, "metadata", "name"), dig(p, "port"))] = true
		}
	}
	job := docs["CronJob/waymark-snapshot"]
	cmd := stringList(dig(job, "spec", "jobTemplate", "spec", "template", "spec", "containers", 0, "command"))
	if len(cmd) < 2 || cmd[1] != "snapshot" {
		t.Fatalf("snapshot job command %v", cmd)
	}
	if u, _ := flagValue(cmd, "--http"); !ports[u] {
		t.Errorf("snapshot job --http %q is not waymark's Service port %v", u, ports)
	}
}

// TestDeployNotReadyAlertMatchesReadyLag keeps the readiness alert on the
// threshold /readyz uses in the example config.
func TestDeployNotReadyAlertMatchesReadyLag(t *testing.T) {
	var cfg map[string]any
	if err := json.Unmarshal(readDeploy(t, "waymark.json"), &cfg); err != nil {
		t.Fatal(err)
	}
	lag := fmt.Sprint(cfg["ready-lag"])
	var rules struct {
		Groups []struct {
			Rules []struct {
				Alert string `yaml:"alert"`
				Expr  string `yaml:"expr"`
			} `yaml:"rules"`
		} `yaml:"groups"`
	}
	if err := yaml.Unmarshal(readDeploy(t, "alerts.yaml"), &rules); err != nil {
		t.Fatal(err)
	}
	found := false
	for _, g := range rules.Groups {
		for _, r := range g.Rules {
			if r.Alert == "WaymarkNotReady" {
				found = true
				if want := "waymark_consumer_lag_messages > " + lag; strings.TrimSpace(r.Expr) != want {
					t.Errorf("WaymarkNotReady expr %q, want %q (ready-lag of waymark.json)", r.Expr, want)
				}
			}
		}
	}
	if !found {
		t.Error("alerts.yaml has no WaymarkNotReady rule")
	}
}

// promWords are PromQL functions, keywords and the label names the rules
// and dashboard use; any other identifier in an expression must be a
// metric this test verifies.
var promWords = map[string]bool{
	"sum": true, "max": true, "min": true, "avg": true, "count": true, "by": true, "without": true,
	"rate": true, "irate": true, "increase": true, "deriv": true, "changes": true, "delta": true,
	"histogram_quantile": true, "clamp_min": true, "abs": true, "and": true, "or": true, "unless": true,
	"on": true, "ignoring": true, "bool": true, "offset": true, "label_values": true,
	"le": true, "instance": true, "job": true, "endpoint": true, "source": true, "code": true, "route": true, "kind": true,
}

var (
	promStringRe = regexp.MustCompile(`"(?:[^"\\]|\\.)*"|'(?:[^'\\]|\\.)*'`)
	promRangeRe  = regexp.MustCompile(`\[[^\]]*\]`)
	promIdentRe  = regexp.MustCompile(`(?:^|[^A-Za-z0-9_:.$])([A-Za-z_:][A-Za-z0-9_:]*)`)
)

// promIdents returns the identifiers of a PromQL expression outside string
// literals and range selectors.
func promIdents(expr string) []string {
	expr = promRangeRe.ReplaceAllString(promStringRe.ReplaceAllString(expr, `""`), "")
	var out []string
	for _, m := range promIdentRe.FindAllStringSubmatch(expr, -1) {
		out = append(out, m[1])
	}
	return out
}

// collectExprs appends every string under a key named expr found anywhere
// in v.
func collectExprs(v any, out *[]string) {
	switch x := v.(type) {
	case map[string]any:
		for k, c := range x {
			if s, ok := c.(string); ok && k == "expr" {
				*out = append(*out, s)
				continue
			}
			collectExprs(c, out)
		}
	case []any:
		for _, c := range x {
			collectExprs(c, out)
		}
	}
}

// templatingQueries returns the queries of a dashboard's query variables
// (a datasource variable's query is a data source type, not PromQL).
func templatingQueries(dash map[string]any) []string {
	var out []string
	tm, _ := dash["templating"].(map[string]any)
	list, _ := tm["list"].([]any)
	for _, v := range list {
		m, _ := v.(map[string]any)
		if m["type"] != "query" {
			continue
		}
		if d, ok := m["definition"].(string); ok {
			out = append(out, d)
		}
		switch q := m["query"].(type) {
		case string:
			out = append(out, q)
		case map[string]any:
			if s, ok := q["query"].(string); ok {
				out = append(out, s)
			}
		}
	}
	return out
}

// deployMetrics returns the metric names used by alerts.yaml and
// dashboard.json, failing on identifiers it cannot classify.
func deployMetrics(t *testing.T) []string {
	t.Helper()
	var exprs []string
	docs, err := yamlDocs(readDeploy(t, "alerts.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	for _, d := range docs {
		collectExprs(d, &exprs)
	}
	nAlerts := len(exprs)
	var dash map[string]any
	if err := json.Unmarshal(readDeploy(t, "dashboard.json"), &dash); err != nil {
		t.Fatal(err)
	}
	collectExprs(dash, &exprs)
	exprs = append(exprs, templatingQueries(dash)...)
	if nAlerts < 5 || len(exprs)-nAlerts < 10 {
		t.Fatalf("found %d alert and %d dashboard expressions", nAlerts, len(exprs)-nAlerts)
	}
	set := map[string]bool{}
	for _, e := range exprs {
		for _, id := range promIdents(e) {
			switch {
			case promWords[id]:
			case strings.HasPrefix(id, "waymark_"), strings.HasPrefix(id, "go_"), strings.HasPrefix(id, "process_"), id == "up":
				set[id] = true
			default:
				t.Errorf("expression %q: identifier %q is neither a known PromQL word nor a checked metric", e, id)
			}
		}
	}
	var out []string
	for m := range set {
		out = append(out, m)
	}
	sort.Strings(out)
	return out
}

// goSource concatenates the repository's non-test Go files.
func goSource(t *testing.T) string {
	t.Helper()
	var b strings.Builder
	err := filepath.WalkDir(repoRoot, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() && (d.Name() == ".git" || d.Name() == "deploy" || d.Name() == "testdata") {
			return filepath.SkipDir
		}
		if !d.IsDir() && strings.HasSuffix(p, ".go") && !strings.HasSuffix(p, "_test.go") {
			src, err := os.ReadFile(p)
			if err != nil {
				return err
			}
			b.Write(src)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// histogramBase strips the series suffixes of a histogram.
func histogramBase(name string) string {
	for _, s := range []string{"_bucket", "_sum", "_count"} {
		if b, ok := strings.CutSuffix(name, s); ok {
			return b
		}
	}
	return name
}

func TestDeployMetricNamesExist(t *testing.T) {
	metrics := deployMetrics(t)
	src := goSource(t)
	for _, m := range metrics {
		switch {
		case m == "up":
			// Written by Prometheus itself for every scrape target.
		case strings.HasPrefix(m, "go_"):
			if !strings.Contains(src, "collectors.NewGoCollector(") {
				t.Errorf("%s: no Go collector is registered", m)
			}
		case strings.HasPrefix(m, "process_"):
			if !strings.Contains(src, "collectors.NewProcessCollector(") {
				t.Errorf("%s: no process collector is registered", m)
			}
		default:
			if !strings.Contains(src, `"`+m+`"`) && !strings.Contains(src, `"`+histogramBase(m)+`"`) {
				t.Errorf("metric %s is not defined in the Go source", m)
			}
		}
	}
}

// TestDeployMetricsExported runs serve's wiring (flags, the example config
// file, an embedded NATS server on a free port, a store in a temp folder),
// puts a little traffic through it and checks /metrics carries every
// series the rules and the dashboard use.
func TestDeployMetricsExported(t *testing.T) {
	metrics := deployMetrics(t)
	f := newServeFlags("serve", io.Discard)
	dir := t.TempDir()
	args := []string{"--config", filepath.Join(deployDir, "waymark.json"), "--data", dir,
		"--http", "127.0.0.1:0", "--nats-listen", "127.0.0.1:-1", "--flush-interval", "20ms"}
	if err := f.parse(args); err != nil {
		t.Fatal(err)
	}
	opts, err := f.options(slog.New(slog.DiscardHandler))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	svc, err := session.Open(ctx, opts)
	if err != nil {
		t.Fatal(err)
	}
	defer func() {
		if err := svc.Shutdown(context.Background()); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	}()
	base := "http://" + svc.HTTPAddr()
	post := func(path, body string) {
		t.Helper()
		resp, err := http.Post(base+path, "application/json", strings.NewReader(body))
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusOK {
			t.Fatalf("POST %s: %d %s", path, resp.StatusCode, b)
		}
	}
	// An invented shop's visitor: two clicks, and one record with no item.
	post("/v1/events", `{"session":"v-1","item":"tent-ridge","ts":1767225600000}
{"session":"v-1","item":"stove-mini","ts":1767225601000}
{"session":"v-1","ts":1767225602000}`)
	deadline := time.Now().Add(20 * time.Second)
	for svc.Engine().Stats().EventsApplied < 2 || svc.Engine().Stats().LastSequence < 2 {
		if time.Now().After(deadline) {
			t.Fatalf("events not applied: %+v", svc.Engine().Stats())
		}
		time.Sleep(20 * time.Millisecond)
	}
	post("/v1/next", `{"items":["tent-ridge"],"k":3}`)

	resp, err := http.Get(base + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	exported := map[string]bool{}
	for _, line := range strings.Split(string(body), "\n") {
		if line == "" || line[0] == '#' {
			continue
		}
		name, _, _ := strings.Cut(line, "{")
		name, _, _ = strings.Cut(name, " ")
		exported[name] = true
	}
	for _, m := range metrics {
		if m != "up" && !exported[m] {
			t.Errorf("%s is used by deploy/ but a running service does not export it", m)
		}
	}
}
