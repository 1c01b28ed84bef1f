package server

import (
	"bytes"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// bigWardFile is a ward export of n valid rows a minute apart from 1 March
// 2024, cases of three events.
func bigWardFile(n int) []byte {
	var b bytes.Buffer
	b.WriteString(wardHeader)
	steps := []string{"REG", "BEGIN", "DONE"}
	t0 := time.Date(2024, 3, 1, 0, 0, 0, 0, time.UTC)
	for i := range n {
		fmt.Fprintf(&b, "%s-%d;%s-%d;%s;triage;%s;%s\n", rawCase, i/3, rawSubject, i/3, rawResource, steps[i%3],
			t0.Add(time.Duration(i)*time.Minute).Format("2006-01-02 15:04:05"))
	}
	return b.Bytes()
}

// TestDiskFull fills a real, small file system: the data folder is a
// 4 MiB tmpfs, mounted in a mount namespace of a child process (this test
// binary re-run, as root or in a user namespace), so nothing outside
// sees it. An upload whose temp files do not fit answers 507 with its
// upload record (status failed, rule disk_full), leaves no version and no
// temp file, and the server then takes a small upload.
func TestDiskFull(t *testing.T) {
	if os.Getenv("FLOWCAT_DISKFULL_CHILD") == "" {
		cmd := exec.Command(os.Args[0], "-test.run=^TestDiskFull$", "-test.v")
		cmd.Env = append(os.Environ(), "FLOWCAT_DISKFULL_CHILD=1")
		attr := &syscall.SysProcAttr{Cloneflags: syscall.CLONE_NEWNS}
		if os.Geteuid() != 0 {
			attr.Cloneflags |= syscall.CLONE_NEWUSER
			attr.UidMappings = []syscall.SysProcIDMap{{ContainerID: 0, HostID: os.Geteuid(), Size: 1}}
			attr.GidMappings = []syscall.SysProcIDMap{{ContainerID: 0, HostID: os.Getegid(), Size: 1}}
		}
		cmd.SysProcAttr = attr
		out, err := cmd.CombinedOutput()
		if err != nil && len(out) == 0 {
			t.Skipf("cannot start a child in a mount namespace here: %v", err)
		}
		if bytes.Contains(out, []byte("--- SKIP")) {
			t.Skipf("child skipped:\n%s", out)
		}
		if err != nil {
			t.Fatalf("child: %v\n%s", err, out)
		}
		if !bytes.Contains(out, []byte("--- PASS: TestDiskFull")) {
			t.Fatalf("child did not pass:\n%s", out)
		}
		t.Logf("child:\n%s", out)
		return
	}
	// In the child: a private mount namespace, then the tmpfs.
	if err := syscall.Mount("", "/", "", syscall.MS_REC|syscall.MS_PRIVATE, ""); err != nil {
		t.Skipf("cannot make mounts private: %v", err)
	}
	dir := filepath.Join(t.TempDir(), "data")
	if err := os.Mkdir(dir, 0o700); err != nil {
		t.Fatal(err)
	}
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, "size=4m"); err != nil {
		t.Skipf("cannot mount a tmpfs: %v", err)
	}
	t.Cleanup(func() { syscall.Unmount(dir, syscall.MNT_DETACH) })

	e := newEnvAt(t, dir)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	partner := e.partner("ward/events")
	big := bigWardFile(150000) // about 10 MB of CSV; its sort runs do not fit
	r := e.upload("ward", "events", partner, "big.csv", big)
	if r.Status != http.StatusInsufficientStorage {
		t.Fatalf("status %d, want 507; body %s", r.Status, clipBody(r.Body))
	}
	b := e.apiErr(r)
	if b.Error.Code != "insufficient_storage" || !strings.Contains(b.Error.Message, "disk is full") || b.Error.Rule != catalog.RuleDiskFull {
		t.Errorf("error %+v", b.Error)
	}
	u := b.Error.Upload
	if u == nil || u.Status != catalog.UploadFailed || u.Error == nil || u.Error.Rule != catalog.RuleDiskFull || u.Bytes == 0 {
		t.Fatalf("upload in the answer %+v, want status failed, rule disk_full", u)
	}
	ups := e.uploads("ward", "events")
	if len(ups) != 1 || ups[0].ID != u.ID || ups[0].Status != catalog.UploadFailed {
		t.Errorf("uploads recorded: %+v", ups)
	}
	if n := len(e.versions("ward", "events")); n != 0 {
		t.Errorf("%d versions after a full disk", n)
	}
	for _, sub := range []string{"tmp", "blobs/tmp"} {
		if left, _ := os.ReadDir(filepath.Join(dir, sub)); len(left) != 0 {
			t.Errorf("%s holds %v after the failure", sub, left)
		}
	}
	// The space is back: a small upload goes through.
	e.mustStatus(e.upload("ward", "events", partner, "small.csv", wardFile(3, 30)), http.StatusCreated, "small upload after the full disk")
	checkNoRawIDs(t, e, rawCase, rawResource, rawSubject)
}
