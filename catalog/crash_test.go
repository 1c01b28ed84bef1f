package catalog

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/anonymize"
	"github.com/flowcat-catalog/flowcat/catalog/blob/localfs"
)

// The crash tests run an ingest in a child process (this test binary,
// re-run with FLOWCAT_CRASH_CHILD set) and end it abruptly: the catalog
// must then hold every committed version whole and nothing of the
// interrupted upload but, at most, an unreferenced blob.

const crashRaw = "RAW-CRASH-CASE-"

func TestMain(m *testing.M) {
	if mode := os.Getenv("FLOWCAT_CRASH_CHILD"); mode != "" {
		crashChild(mode)
		return
	}
	os.Exit(m.Run())
}

// crashChild ingests into the store of FLOWCAT_CRASH_DIR and dies: at the
// commit hook ("commit") or when killed while reading ("read").
func crashChild(mode string) {
	dir := os.Getenv("FLOWCAT_CRASH_DIR")
	mk, err := anonymize.ParseMasterKey(os.Getenv("FLOWCAT_CRASH_KEY"))
	if err != nil {
		os.Exit(10)
	}
	blobs, err := localfs.New(filepath.Join(dir, "blobs"))
	if err != nil {
		os.Exit(11)
	}
	s, err := Open(filepath.Join(dir, "catalog.db"), blobs, Options{Master: mk, TempDir: filepath.Join(dir, "tmp"), RunEvents: 500})
	if err != nil {
		os.Exit(12)
	}
	if mode == "audit" {
		auditChild(s)
	}
	var src io.Reader
	switch mode {
	case "commit":
		testHookBeforeCommit = func() { os.Exit(3) }
		src = bytes.NewReader(genCSV(genOpt{Seed: 2, N: 3000, CasePfx: crashRaw}))
	case "groups":
		testHookGroupsWritten = func() { os.Exit(3) }
		src = bytes.NewReader(genCSV(genOpt{Seed: 2, N: 3000, CasePfx: crashRaw}))
	case "put":
		// Stall the blob write after its first bytes, then wait to be
		// killed.
		testHookPut = func(r io.Reader) io.Reader { return io.MultiReader(io.LimitReader(r, 4096), stallAfterSignal{}) }
		src = bytes.NewReader(genCSV(genOpt{Seed: 4, N: 3000, CasePfx: crashRaw}))
	case "read":
		// A body that never ends: say when runs have spilled, then stall
		// until killed.
		src = io.MultiReader(bytes.NewReader(genCSV(genOpt{Seed: 3, N: 5000, CasePfx: crashRaw})), stallAfterSignal{})
	}
	_, err = s.Ingest(context.Background(), "crash", "events", src, IngestOptions{Filename: "night.csv", By: "child"})
	if err != nil {
		os.Exit(4)
	}
	os.Exit(0)
}

// stallAfterSignal prints a line the parent waits for, then blocks.
type stallAfterSignal struct{}

func (stallAfterSignal) Read([]byte) (int, error) {
	os.Stdout.WriteString("stalled\n")
	select {}
}

// startChildUntil starts cmd and waits (a minute at most) until it prints
// a line holding word.
func startChildUntil(t *testing.T, cmd *exec.Cmd, word string) {
	t.Helper()
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	seen := make(chan bool, 1)
	go func() {
		sc := bufio.NewScanner(stdout)
		for sc.Scan() {
			if strings.Contains(sc.Text(), word) {
				seen <- true
				return
			}
		}
		seen <- false
	}()
	select {
	case ok := <-seen:
		if !ok {
			err := cmd.Wait()
			t.Fatalf("the child ended (%v) before it printed %q", err, word)
		}
	case <-time.After(60 * time.Second):
		cmd.Process.Kill()
		t.Fatalf("the child never printed %q", word)
	}
}

func crashSetup(t *testing.T) (*env, *IngestResult) {
	e := newEnv(t, nil)
	e.dataset(t, "crash", "events", nil)
	first := e.ingest(t, "crash", "events", genCSV(genOpt{Seed: 1, N: 400}), "night1.csv")
	e.s.Close() // the child takes the bbolt lock
	e.s = nil
	return e, first
}

func crashChildCmd(t *testing.T, e *env, mode string) *exec.Cmd {
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), "FLOWCAT_CRASH_CHILD="+mode, "FLOWCAT_CRASH_DIR="+e.dir, "FLOWCAT_CRASH_KEY="+e.master.Hex())
	return cmd
}

// crashCheck reopens the store and checks it is as before the child ran.
func crashCheck(t *testing.T, e *env, first *IngestResult) {
	t.Helper()
	e.open(t, nil)
	ctx := context.Background()
	vs, err := e.s.Versions(ctx, "crash", "events")
	if err != nil || len(vs) != 1 || vs[0].SnapshotID != first.Version.SnapshotID {
		t.Fatalf("after the crash: versions %+v, %v; want only version 1", vs, err)
	}
	ds, _ := e.s.Dataset(ctx, "crash", "events")
	if ds.Latest != 1 || ds.Uploads != 1 {
		t.Errorf("dataset latest %d, uploads %d; want 1, 1", ds.Latest, ds.Uploads)
	}
	for _, f := range vs[0].Manifest.Files {
		e.blobBytes(t, f.SHA256) // present and whole
	}
	// Whatever the crash left on disk holds no raw identifier.
	if hits := grepDir(t, e.dir, []string{crashRaw}); len(hits) > 0 {
		t.Errorf("raw identifiers on disk after the crash: %v", hits)
	}
}

func TestCrashBetweenBlobAndCommit(t *testing.T) {
	e, first := crashSetup(t)
	cmd := crashChildCmd(t, e, "commit")
	out, err := cmd.CombinedOutput()
	var xe *exec.ExitError
	if !errors.As(err, &xe) || xe.ExitCode() != 3 {
		t.Fatalf("child did not stop at the commit hook: %v\n%s", err, out)
	}
	crashCheck(t, e, first)
	// The crash left the new file durable but unreferenced; sending the
	// file again commits it as version 2.
	if n := len(e.blobIDs(t)); n != 2 {
		t.Errorf("blob store holds %d files, want 2 (version 1's and the orphan)", n)
	}
	again := e.ingest(t, "crash", "events", genCSV(genOpt{Seed: 2, N: 3000, CasePfx: crashRaw}), "night.csv")
	if again.Version.Number != 2 || again.Version.Manifest.Parent != 1 {
		t.Errorf("retry after crash: version %d parent %d", again.Version.Number, again.Version.Manifest.Parent)
	}
	if n := len(e.blobIDs(t)); n != 2 {
		t.Errorf("retry wrote a second copy: %d blobs", n)
	}
}

func TestCrashWhileReading(t *testing.T) {
	e, first := crashSetup(t)
	cmd := crashChildCmd(t, e, "read")
	startChildUntil(t, cmd, "stalled")
	// The body was read ahead of the parser: wait for the runs of 500
	// events to spill, then kill without warning.
	var runs []string
	for deadline := time.Now().Add(20 * time.Second); len(runs) == 0 && time.Now().Before(deadline); time.Sleep(10 * time.Millisecond) {
		runs, _ = filepath.Glob(filepath.Join(e.tmp, "run-*"))
	}
	if len(runs) == 0 {
		t.Error("no sort run had spilled: the test would not cover spilled runs")
	}
	cmd.Process.Kill()
	cmd.Wait()
	crashCheck(t, e, first)
}

// TestCrashDuringBlobWrite kills the process while the new file is being
// written into the blob store: the partial temporary file is there, and
// reopening the store (what a restart does) plus a collection leave no
// temporary anywhere.
func TestCrashDuringBlobWrite(t *testing.T) {
	e, first := crashSetup(t)
	cmd := crashChildCmd(t, e, "put")
	startChildUntil(t, cmd, "stalled")
	blobTmp := filepath.Join(e.dir, "blobs", "tmp")
	puts, _ := filepath.Glob(filepath.Join(blobTmp, "put-*"))
	if len(puts) != 1 {
		t.Fatalf("blob temp files while the write stalls: %v, want one", puts)
	}
	if fi, err := os.Stat(puts[0]); err != nil || fi.Size() != 4096 {
		t.Errorf("the stalled write's temp file: %v, %v; want 4096 bytes", fi, err)
	}
	cmd.Process.Kill()
	cmd.Wait()
	if left, _ := os.ReadDir(blobTmp); len(left) != 1 {
		t.Fatalf("the kill left %d blob temp files, want the one", len(left))
	}

	crashCheck(t, e, first) // reopens the store
	for _, dir := range []string{blobTmp, e.tmp} {
		if left, _ := os.ReadDir(dir); len(left) != 0 {
			t.Errorf("after the restart %s holds %v", dir, left)
		}
	}
	// A temporary left while the store runs (a failed clean-up) waits for
	// the grace period; the collection with no grace removes it.
	stray := filepath.Join(blobTmp, "put-stray")
	if err := os.WriteFile(stray, []byte("partial"), 0o600); err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	res, err := e.s.CollectGarbage(ctx, GCOptions{}, "test")
	if err != nil || res.Temporaries != 0 {
		t.Fatalf("gc with the default grace: %+v, %v; want the young temporary kept", res, err)
	}
	res, err = e.s.CollectGarbage(ctx, GCOptions{Grace: -1}, "test")
	if err != nil || res.Temporaries != 1 || res.TemporaryBytes != 7 {
		t.Fatalf("gc without grace: %+v, %v; want 1 temporary of 7 bytes", res, err)
	}
	if left, _ := os.ReadDir(blobTmp); len(left) != 0 {
		t.Errorf("after gc %s holds %v", blobTmp, left)
	}
}
