package cli_test

import (
	"bufio"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// buildFlowcat builds the command into a temporary directory: the demo
// prints the path of the binary that runs it, which must be flowcat, not
// the test binary.
func buildFlowcat(t *testing.T) string {
	t.Helper()
	if _, err := exec.LookPath("go"); err != nil {
		t.Skip("no go command on PATH to build flowcat with")
	}
	bin := filepath.Join(t.TempDir(), "flowcat")
	cmd := exec.Command("go", "build", "-o", bin, "./flowcat")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// process is a command running in the background whose output is read
// as it comes.
type process struct {
	cmd *exec.Cmd
	mu  sync.Mutex
	out strings.Builder
	eof chan struct{}
}

func startProcess(t *testing.T, dir string, name string, args ...string) *process {
	t.Helper()
	p := &process{cmd: exec.Command(name, args...), eof: make(chan struct{})}
	p.cmd.Dir = dir
	p.cmd.Env = append(os.Environ(), "FLOWCAT_MASTER_KEY=", "FLOWCAT_MASTER_KEY_FILE=")
	stdout, err := p.cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	p.cmd.Stderr = p.cmd.Stdout
	if err := p.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() {
		defer close(p.eof)
		sc := bufio.NewScanner(stdout)
		sc.Buffer(make([]byte, 1<<20), 1<<20)
		for sc.Scan() {
			p.mu.Lock()
			p.out.WriteString(sc.Text() + "\n")
			p.mu.Unlock()
		}
	}()
	t.Cleanup(func() { p.interrupt(t) })
	return p
}

func (p *process) text() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.out.String()
}

// interrupt sends SIGINT, as Ctrl-C does, and waits for the exit.
func (p *process) interrupt(t *testing.T) error {
	if p.cmd.ProcessState != nil {
		return nil
	}
	p.cmd.Process.Signal(syscall.SIGINT)
	done := make(chan error, 1)
	go func() { <-p.eof; done <- p.cmd.Wait() }()
	select {
	case err := <-done:
		return err
	case <-time.After(60 * time.Second):
		p.cmd.Process.Kill()
		t.Error("process did not stop within 60 s of SIGINT")
		return <-done
	}
}

// commandsOf returns the lines of the demo's guide a user types: exports
// and calls of the program, as printed.
func commandsOf(text, prog string) []string {
	var cmds []string
	for _, l := range strings.Split(text, "\n") {
		l = strings.TrimSpace(l)
		if strings.HasPrefix(l, "export FLOWCAT_") || strings.HasPrefix(l, prog+" ") {
			cmds = append(cmds, l)
		}
	}
	return cmds
}

// TestDemoCommandsRunAsPrinted runs the built demo as a user would, runs
// every command it prints, in the order printed, in a shell, against the
// demo's server; interrupts it and serves its data again with the command
// it prints on the way out.
func TestDemoCommandsRunAsPrinted(t *testing.T) {
	bin := buildFlowcat(t)
	work := t.TempDir()
	data := filepath.Join(work, "demo data") // a space: the printed commands must quote
	// Nine nights: the lost column falls on night 8, after the five of
	// history drift needs.
	demo := startProcess(t, work, bin, "demo", "--data", data, "--addr", "127.0.0.1:0", "--days", "9", "--quiet")
	text := waitFor(t, "the demo's guide", func() string {
		if s := demo.text(); strings.Contains(s, "Press Ctrl-C") {
			return s
		}
		return ""
	})
	cmds := commandsOf(text, bin)
	if len(cmds) < 15 {
		t.Fatalf("the demo printed %d commands, want the three roles' (15 or more):\n%s", len(cmds), text)
	}
	if !strings.Contains(text, "field_dropped") {
		t.Errorf("no drift alert raised by the planted lost column:\n%s", text)
	}
	// One shell, as a user who pastes the guide line by line; the first
	// failing command stops it.
	script := "set -e\n"
	for _, c := range cmds {
		script += "echo '>>> " + strings.ReplaceAll(c, "'", "") + "'\n" + c + "\n"
	}
	sh := exec.Command("bash", "-c", script)
	sh.Dir = t.TempDir()
	sh.Env = append(os.Environ(), "FLOWCAT_SERVER=", "FLOWCAT_TOKEN=")
	out, err := sh.CombinedOutput()
	if err != nil {
		t.Fatalf("a printed command failed: %v\n%s", err, out)
	}
	for _, want := range []string{
		"would be accepted",              // partner: validate
		"walkin-visits@9 created",        // partner: upload of the night held back
		"field_dropped",                  // curator: alerts
		"resource_id",                    // curator: the field that dropped
		"ok ",                            // student: verify
		"cff-version",                    // student: cite
		"taken as the start of that day", // student: summary --from DATE
		"quality report (format ",        // curator: quality
		"events added", "completeness",   // curator: diff
	} {
		if !strings.Contains(string(out), want) {
			t.Errorf("the printed commands' output lacks %q:\n%s", want, out)
		}
	}

	// Ctrl-C: the demo says where its data is and how to serve it again.
	if err := demo.interrupt(t); err != nil {
		t.Errorf("demo exit after SIGINT: %v", err)
	}
	bye := demo.text()[len(text):]
	m := regexp.MustCompile(`serve it again: +(.+)`).FindStringSubmatch(bye)
	if m == nil || !strings.Contains(bye, data) {
		t.Fatalf("the demo's farewell lacks the serve command and %s:\n%s", data, bye)
	}
	again := exec.Command("bash", "-c", "exec "+m[1])
	again.Dir = t.TempDir()
	again.Env = append(os.Environ(), "FLOWCAT_MASTER_KEY=", "FLOWCAT_MASTER_KEY_FILE=")
	var log syncBuffer
	again.Stdout, again.Stderr = &log, &log
	if err := again.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() { again.Process.Signal(syscall.SIGINT); again.Wait() }()
	url := waitFor(t, "the served-again server's URL", func() string {
		if m := urlRE.FindStringSubmatch(log.String()); m != nil {
			return m[1]
		}
		return ""
	})
	tok, _ := os.ReadFile(filepath.Join(data, "demo", "member.token"))
	env := map[string]string{"FLOWCAT_SERVER": url, "FLOWCAT_TOKEN": strings.TrimSpace(string(tok))}
	if code, out, errs := run(t, env, "versions", "quillon-flow/walkin-visits"); code != 0 || !strings.Contains(out, "published") {
		t.Errorf("versions on the data served again: exit %d %s %s", code, out, errs)
	}
}

// TestDemoRefusesBusyPort: a demo on a port in use fails before it
// creates its data directory.
func TestDemoRefusesBusyPort(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	data := filepath.Join(t.TempDir(), "never")
	code, _, errs := run(t, nil, "demo", "--data", data, "--addr", ln.Addr().String(), "--quiet")
	if code != 1 || !strings.Contains(errs, ln.Addr().String()) || !strings.Contains(errs, "nothing was created") {
		t.Errorf("demo on a busy port: exit %d, %q", code, errs)
	}
	if _, err := os.Stat(data); err == nil {
		t.Errorf("the refused demo created %s", data)
	}
}
