// Package deploy holds the container's files (entrypoint.sh, the compose
// environment example) and their tests: no Docker engine runs here, so
// the tests parse the compose file and the Dockerfile and run the
// entrypoint's logic with a real flowcat binary.
package deploy

import (
	"bufio"
	"bytes"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/goccy/go-yaml"
)

// compose is the part of the Compose file format (compose-spec.io) the
// checks read.
type compose struct {
	Services map[string]struct {
		Image       string            `yaml:"image"`
		Build       any               `yaml:"build"`
		Command     []string          `yaml:"command"`
		Entrypoint  []string          `yaml:"entrypoint"`
		Environment map[string]string `yaml:"environment"`
		Volumes     []string          `yaml:"volumes"`
		Ports       []string          `yaml:"ports"`
		Secrets     []string          `yaml:"secrets"`
		Restart     string            `yaml:"restart"`
		DependsOn   map[string]struct {
			Condition string `yaml:"condition"`
		} `yaml:"depends_on"`
	} `yaml:"services"`
	Volumes map[string]any `yaml:"volumes"`
	Secrets map[string]struct {
		File string `yaml:"file"`
	} `yaml:"secrets"`
}

// TestComposeFile validates docker-compose.yml as far as it can be without
// an engine: it parses strictly, every service it depends on exists with
// a condition the Compose specification defines, every named volume and
// secret is declared, flowcat's S3 endpoint names the s3 service on
// versitygw's default port 7070 (versitygw's --port default, from its
// source), its blob store names the bucket the s3-bucket service makes,
// its master key file is the secret it mounts, and every variable it
// takes from .env is in deploy/compose.env.example.
func TestComposeFile(t *testing.T) {
	raw, err := os.ReadFile("../docker-compose.yml")
	if err != nil {
		t.Fatal(err)
	}
	var c compose
	if err := yaml.UnmarshalWithOptions(raw, &c, yaml.Strict()); err != nil {
		t.Fatalf("docker-compose.yml: %v", err)
	}
	for _, name := range []string{"s3", "s3-bucket", "flowcat"} {
		if _, ok := c.Services[name]; !ok {
			t.Fatalf("no service %q", name)
		}
	}
	conditions := []string{"service_started", "service_healthy", "service_completed_successfully"} // compose-spec depends_on long syntax
	for name, s := range c.Services {
		if !slices.Contains([]string{"", "no", "always", "on-failure", "unless-stopped"}, s.Restart) { // compose-spec restart
			t.Errorf("%s: restart %q", name, s.Restart)
		}
		if s.Image == "" && s.Build == nil {
			t.Errorf("%s: neither image nor build", name)
		}
		for dep, d := range s.DependsOn {
			if _, ok := c.Services[dep]; !ok {
				t.Errorf("%s depends on %s, which is not a service", name, dep)
			}
			if !slices.Contains(conditions, d.Condition) {
				t.Errorf("%s: depends_on %s condition %q", name, dep, d.Condition)
			}
		}
		for _, v := range s.Volumes {
			src, _, _ := strings.Cut(v, ":")
			if !strings.HasPrefix(src, ".") && !strings.HasPrefix(src, "/") {
				if _, ok := c.Volumes[src]; !ok {
					t.Errorf("%s: volume %q is not declared", name, src)
				}
			}
		}
		for _, sec := range s.Secrets {
			if _, ok := c.Secrets[sec]; !ok {
				t.Errorf("%s: secret %q is not declared", name, sec)
			}
		}
	}
	fc := c.Services["flowcat"]
	if dep := fc.DependsOn["s3-bucket"]; dep.Condition != "service_completed_successfully" {
		t.Errorf("flowcat starts before the bucket exists: %+v", fc.DependsOn)
	}
	if got := fc.Environment["AWS_ENDPOINT_URL_S3"]; got != "http://s3:7070" {
		t.Errorf("flowcat's S3 endpoint %q, want the s3 service on port 7070", got)
	}
	bucket := c.Services["s3-bucket"].Environment["BUCKET"]
	if blobs := fc.Environment["FLOWCAT_BLOBS"]; bucket == "" || !strings.HasPrefix(blobs, "s3://"+bucket+"/") {
		t.Errorf("FLOWCAT_BLOBS %q is not in the bucket %q the s3-bucket service makes", blobs, bucket)
	}
	keyFile := fc.Environment["FLOWCAT_MASTER_KEY_FILE"]
	if len(fc.Secrets) != 1 || keyFile != "/run/secrets/"+fc.Secrets[0] {
		t.Errorf("FLOWCAT_MASTER_KEY_FILE %q is not the secret mounted (%v)", keyFile, fc.Secrets)
	}
	if !slices.Contains(fc.Volumes, "flowcat-data:/data") {
		t.Errorf("flowcat's data volume: %v", fc.Volumes)
	}
	for _, p := range fc.Ports {
		if !strings.HasPrefix(p, "127.0.0.1:") {
			t.Errorf("port %q is published beyond loopback", p)
		}
	}
	s3 := c.Services["s3"]
	if !strings.HasPrefix(s3.Image, "versity/versitygw:v") || !slices.Equal(s3.Command, []string{"posix", "/data"}) {
		t.Errorf("s3 service: %s %v", s3.Image, s3.Command)
	}
	if len(s3.Ports) != 0 {
		t.Errorf("the S3 store is published: %v", s3.Ports)
	}
	example, err := os.ReadFile("compose.env.example")
	if err != nil {
		t.Fatal(err)
	}
	for _, m := range regexp.MustCompile(`\$\{([A-Z0-9_]+)`).FindAllStringSubmatch(string(raw), -1) {
		if !regexp.MustCompile(`(?m)^` + m[1] + `=`).Match(example) {
			t.Errorf("${%s} is not in deploy/compose.env.example", m[1])
		}
	}
}

// TestDockerfile checks what the image relies on: the entrypoint script
// it copies exists and is executable, a HEALTHCHECK asks /readyz through
// the binary, and .dockerignore keeps out .git and test data but lets in
// every file the build copies or embeds.
func TestDockerfile(t *testing.T) {
	df, err := os.ReadFile("../Dockerfile")
	if err != nil {
		t.Fatal(err)
	}
	text := string(df)
	for _, want := range []string{
		"COPY deploy/entrypoint.sh /usr/local/bin/flowcat-entrypoint",
		`ENTRYPOINT ["/usr/local/bin/flowcat-entrypoint"]`,
		"HEALTHCHECK ",
		`"flowcat", "ready"`,
		"/readyz",
		"USER flowcat",
		"VOLUME /data",
	} {
		if !strings.Contains(text, want) {
			t.Errorf("Dockerfile lacks %q", want)
		}
	}
	fi, err := os.Stat("entrypoint.sh")
	if err != nil || fi.Mode()&0o111 == 0 {
		t.Errorf("deploy/entrypoint.sh missing or not executable: %v", err)
	}
	ign, err := os.ReadFile("../.dockerignore")
	if err != nil {
		t.Fatal(err)
	}
	var patterns []string
	sc := bufio.NewScanner(bytes.NewReader(ign))
	for sc.Scan() {
		if l := strings.TrimSpace(sc.Text()); l != "" && !strings.HasPrefix(l, "#") {
			patterns = append(patterns, l)
		}
	}
	// A file is excluded by the last pattern that matches it (Docker's
	// .dockerignore rules; "**" is any number of folders, "!" re-includes).
	excluded := func(path string) bool {
		out := false
		for _, p := range patterns {
			neg := strings.HasPrefix(p, "!")
			p = strings.TrimPrefix(strings.TrimPrefix(p, "!"), "/")
			re := "^" + strings.NewReplacer(`\*\*/`, "(.*/)?", `\*`, "[^/]*").Replace(regexp.QuoteMeta(p)) + "(/.*)?$"
			if regexp.MustCompile(re).MatchString(path) {
				out = !neg
			}
		}
		return out
	}
	for _, keep := range []string{"go.mod", "go.sum", "deploy/entrypoint.sh", "cli/flowcat/main.go", "schema/service-event-v1.schema.json", "web/index.html", "web/version.html", "README.md"} {
		if excluded(keep) {
			t.Errorf(".dockerignore excludes %s, which the build needs", keep)
		}
	}
	for _, drop := range []string{".git/HEAD", "testdata/sepsis/sepsis-cases.csv.gz", "catalog/export/testdata/duckdb/node_modules/x", "schema/xes_test.go"} {
		if !excluded(drop) {
			t.Errorf(".dockerignore lets in %s", drop)
		}
	}
}

// buildFlowcat builds the binary once per test run.
func buildFlowcat(t *testing.T) string {
	t.Helper()
	gobin, err := exec.LookPath("go")
	if err != nil {
		t.Skip("the entrypoint test needs the go command to build flowcat")
	}
	dir := t.TempDir()
	out, err := exec.Command(gobin, "build", "-ldflags", "-X github.com/flowcat-catalog/flowcat/server.buildVersion=test-1", "-o", filepath.Join(dir, "flowcat"), "../cli/flowcat").CombinedOutput()
	if err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return dir
}

func freeAddr(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().String()
}

// container runs deploy/entrypoint.sh as the image does, with the built
// binary first on PATH and only the environment given.
type container struct {
	cmd    *exec.Cmd
	stderr *bytes.Buffer
	addr   string
	done   chan error
}

func start(t *testing.T, bin string, env map[string]string, args ...string) *container {
	t.Helper()
	cmd := exec.Command("/bin/sh", append([]string{"entrypoint.sh"}, args...)...)
	cmd.Env = []string{"PATH=" + bin + ":/usr/bin:/bin", "HOME=" + t.TempDir()}
	for k, v := range env {
		cmd.Env = append(cmd.Env, k+"="+v)
	}
	var stderr bytes.Buffer
	cmd.Stderr, cmd.Stdout = &stderr, &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	c := &container{cmd: cmd, stderr: &stderr, addr: env["FLOWCAT_ADDR"], done: make(chan error, 1)}
	go func() { c.done <- cmd.Wait() }()
	t.Cleanup(func() { c.stop(t) })
	return c
}

// ready waits until /readyz answers 200, or the process ends.
func (c *container) ready(t *testing.T) {
	t.Helper()
	deadline := time.Now().Add(60 * time.Second)
	for time.Now().Before(deadline) {
		select {
		case err := <-c.done:
			c.done <- err
			t.Fatalf("the container exited: %v\n%s", err, c.stderr)
		default:
		}
		res, err := http.Get("http://" + c.addr + "/readyz")
		if err == nil {
			res.Body.Close()
			if res.StatusCode == http.StatusOK {
				return
			}
		}
		time.Sleep(100 * time.Millisecond)
	}
	t.Fatalf("not ready within 60 s\n%s", c.stderr)
}

// stop sends SIGTERM, as docker stop does, and waits for the exit.
func (c *container) stop(t *testing.T) error {
	if c.cmd.ProcessState != nil {
		return nil
	}
	c.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case err := <-c.done:
		c.done <- err
		return err
	case <-time.After(30 * time.Second):
		c.cmd.Process.Kill()
		t.Error("the container did not stop within 30 s of SIGTERM")
		return nil
	}
}

// wait returns the exit of a container expected to end by itself.
func (c *container) wait(t *testing.T) error {
	t.Helper()
	select {
	case err := <-c.done:
		c.done <- err
		return err
	case <-time.After(60 * time.Second):
		t.Fatalf("the container did not exit\n%s", c.stderr)
		return nil
	}
}

// TestEntrypoint runs the image's entrypoint logic on an empty volume:
// it initializes the volume by itself and serves; with the master key
// given by file or environment, init takes that key (no master.key in the
// volume) and serve opens the catalog with it, also after a restart; the
// binary's health check and --version work as the Dockerfile uses them.
func TestEntrypoint(t *testing.T) {
	bin := buildFlowcat(t)
	keyDir := t.TempDir()
	out, err := exec.Command(filepath.Join(bin, "flowcat"), "init", "--data", filepath.Join(keyDir, "k")).CombinedOutput()
	if err != nil {
		t.Fatalf("making a key: %v %s", err, out)
	}
	keyFile := filepath.Join(keyDir, "secret-key")
	if err := os.Rename(filepath.Join(keyDir, "k", "master.key"), keyFile); err != nil {
		t.Fatal(err)
	}
	keyHex, err := os.ReadFile(keyFile)
	if err != nil {
		t.Fatal(err)
	}

	t.Run("version", func(t *testing.T) {
		out, err := exec.Command(filepath.Join(bin, "flowcat"), "--version").CombinedOutput()
		if err != nil || !strings.HasPrefix(string(out), "flowcat test-1 (go") {
			t.Errorf("--version: %v %q", err, out)
		}
	})

	cases := []struct {
		name string
		env  map[string]string
		// keyInVolume: without a given key, init writes one to the volume.
		keyInVolume bool
	}{
		{"key file", map[string]string{"FLOWCAT_MASTER_KEY_FILE": keyFile}, false},
		{"key in environment", map[string]string{"FLOWCAT_MASTER_KEY": strings.TrimSpace(string(keyHex))}, false},
		{"no key given", map[string]string{}, true},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			data := filepath.Join(t.TempDir(), "data") // an empty volume
			if err := os.Mkdir(data, 0o700); err != nil {
				t.Fatal(err)
			}
			env := map[string]string{"FLOWCAT_DATA": data, "FLOWCAT_ADDR": freeAddr(t)}
			for k, v := range tc.env {
				env[k] = v
			}
			c := start(t, bin, env)
			c.ready(t)
			if !strings.Contains(c.stderr.String(), "initializing it") {
				t.Errorf("no initialization logged:\n%s", c.stderr)
			}
			_, err := os.Stat(filepath.Join(data, "master.key"))
			if tc.keyInVolume != (err == nil) {
				t.Errorf("master.key in the volume: %v, want %v", err == nil, tc.keyInVolume)
			}
			// The health check of the Dockerfile, against this server.
			hc := exec.Command(filepath.Join(bin, "flowcat"), "ready", "--quiet", "--url", "http://"+env["FLOWCAT_ADDR"]+"/readyz")
			if out, err := hc.CombinedOutput(); err != nil {
				t.Errorf("flowcat ready: %v %s", err, out)
			}
			if err := c.stop(t); err != nil {
				t.Errorf("stop: %v\n%s", err, c.stderr)
			}
			// A restart (restart: unless-stopped) serves the same volume
			// without initializing it again.
			c2 := start(t, bin, env)
			c2.ready(t)
			if strings.Contains(c2.stderr.String(), "initializing it") {
				t.Errorf("the restart initialized the volume again:\n%s", c2.stderr)
			}
			c2.stop(t)
			if !tc.keyInVolume {
				// Another key than the one the catalog was made under is
				// refused by name; the container exits rather than serving.
				bad := map[string]string{"FLOWCAT_DATA": data, "FLOWCAT_ADDR": env["FLOWCAT_ADDR"], "FLOWCAT_MASTER_KEY": strings.Repeat("ab", 32)}
				c3 := start(t, bin, bad)
				if err := c3.wait(t); err == nil || !strings.Contains(c3.stderr.String(), "master key") {
					t.Errorf("a wrong key: %v\n%s", err, c3.stderr)
				}
			}
		})
	}

	t.Run("other commands pass through", func(t *testing.T) {
		c := start(t, bin, map[string]string{"FLOWCAT_ADDR": "unused"}, "schema")
		if err := c.wait(t); err != nil || !strings.Contains(c.stderr.String(), "occurred_at") {
			t.Errorf("entrypoint schema: %v\n%s", err, c.stderr)
		}
	})

	t.Run("log level", func(t *testing.T) {
		data := t.TempDir()
		addr := freeAddr(t)
		c := start(t, bin, map[string]string{"FLOWCAT_ADDR": addr}, "serve", "--data", data, "--addr", addr, "--log-level", "loud")
		if err := c.wait(t); err == nil || !strings.Contains(c.stderr.String(), "--log-level") {
			t.Errorf("--log-level loud: %v\n%s", err, c.stderr)
		}
		c = start(t, bin, map[string]string{"FLOWCAT_ADDR": addr}, "serve", "--data", data, "--addr", addr, "--log-level", "warn")
		c.ready(t)
		http.Get("http://" + addr + "/healthz")
		c.stop(t)
		if strings.Contains(c.stderr.String(), `"msg":"request"`) {
			t.Errorf("--log-level warn still logs each request:\n%s", c.stderr)
		}
	})
}
