package cli

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/blob"
	"github.com/flowcat-catalog/flowcat/catalog/export"
)

// pinName is the file pull writes to pin what a directory holds, and
// verify reads; oldLockName is what releases up to 8a7be85 wrote, still
// read when no pin is there.
const (
	pinName     = "flowcat.pin"
	oldLockName = "flowcat.lock"
	qualityName = "quality.json"
)

// pinFile pins a pulled version by its content alone: the dataset, the
// version, its snapshot id and every file's sha256. It names no server and
// no time, so two pulls of one version, from any address of the catalog,
// write the same bytes.
type pinFile struct {
	PinVersion int          `json:"pin_version"`
	Dataset    string       `json:"dataset"`
	Version    int          `json:"version"`
	SnapshotID string       `json:"snapshot_id"` // sha256 of manifest.json
	Files      []pinnedFile `json:"files"`

	// server is where an old lock file says it came from; legacy marks
	// one (read only), which does not list the quality report.
	server string
	legacy bool
}

type pinnedFile struct {
	Path   string `json:"path"`
	SHA256 string `json:"sha256"`
	Bytes  int64  `json:"bytes"`
	Rows   int64  `json:"rows,omitempty"`
}

// marshalPin is the pin's one encoding: indented JSON and a newline.
func marshalPin(p *pinFile) []byte {
	b, _ := json.MarshalIndent(p, "", "  ")
	return append(b, '\n')
}

// decodePin reads a pin, or a lock file of earlier releases (which also
// named a server and a time, and, once versions had case tables, listed
// the case table apart from the files).
func decodePin(b []byte) (*pinFile, bool) {
	var raw struct {
		PinVersion  int          `json:"pin_version"`
		LockVersion int          `json:"lock_version"`
		Server      string       `json:"server"`
		Dataset     string       `json:"dataset"`
		Version     int          `json:"version"`
		SnapshotID  string       `json:"snapshot_id"`
		Files       []pinnedFile `json:"files"`
		// A lock file's case table, listed apart from its files.
		CaseTable *pinnedFile `json:"case_table"`
	}
	if err := json.Unmarshal(b, &raw); err != nil || (raw.PinVersion != 1 && raw.LockVersion != 1) ||
		raw.SnapshotID == "" || raw.Version < 1 || raw.Dataset == "" {
		return nil, false
	}
	if raw.CaseTable != nil && raw.PinVersion != 1 {
		raw.Files = append(raw.Files, *raw.CaseTable) // where Manifest.Blobs lists it
	}
	return &pinFile{PinVersion: 1, Dataset: raw.Dataset, Version: raw.Version, SnapshotID: raw.SnapshotID, Files: raw.Files,
		server: raw.Server, legacy: raw.PinVersion != 1}, true
}

func newPullCmd(e *env) *cobra.Command {
	var out, pinPath string
	var replace bool
	c := &cobra.Command{
		Use:   "pull PROJECT/DATASET[@VERSION] -o DIR | pull --pin FILE -o DIR",
		Short: "Download a version, verify every sha256 and write a pin file",
		Long: `Pull downloads a version's manifest, quality report and Parquet files into DIR, checks each
file's sha256 and the manifest's hash (the snapshot id), and writes DIR/flowcat.pin naming the
dataset, version, snapshot id and every file's sha256: the content, not where it came from, so
pulling the same version again, from any address of the catalog, writes the same bytes. An
interrupted pull resumes where it stopped. A DIR that holds another dataset or version is
refused unless --replace is given.

VERSION is a number, latest (the default: the newest published version), a snapshot id prefix
of 8 or more hex digits, or an RFC 3339 instant (the version published and in force then).

With --pin FILE, pull reproduces a pinned version from the server that --server or
FLOWCAT_SERVER names (a lock file of older releases, flowcat.lock, names its server, used when
neither is given): the version is found by its snapshot id, and pull fails, keeping nothing new,
when any byte differs from the pin.`,
		Args: cobra.MaximumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if out == "" {
				return usageErr("pull: -o DIR is required")
			}
			var (
				r    ref
				want *pinFile
			)
			switch {
			case pinPath != "" && len(args) > 0:
				return usageErr("pull: give a dataset or --pin, not both")
			case pinPath != "":
				p, err := readPinFile(pinPath)
				if err != nil {
					return err
				}
				if e.server == "" && os.Getenv("FLOWCAT_SERVER") == "" && p.server != "" {
					e.server = p.server
				}
				want = p
				r, err = parseRef(p.Dataset, false)
				if err != nil {
					return fmt.Errorf("%s: dataset %q: %w", pinPath, p.Dataset, err)
				}
				r.Selector = p.SnapshotID
			case len(args) == 1:
				var err error
				if r, err = parseRef(args[0], true); err != nil {
					return err
				}
			default:
				return usageErr("pull: give PROJECT/DATASET[@VERSION] or --pin FILE")
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			pin, err := e.pull(cmd, cl, r, out, want, replace)
			if err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, pin)
			}
			var rows int64
			for _, f := range pin.Files {
				rows += f.Rows
			}
			how := "all sha256 verified"
			if want != nil {
				how = "identical to " + pinPath
			}
			fmt.Fprintf(e.stdout, "pulled %s@%d into %s: %d files, %d rows, %s\nsnapshot %s\n",
				pin.Dataset, pin.Version, out, len(pin.Files), rows, how, pin.SnapshotID)
			printLoadLines(cmd, e, cl, r, out)
			return nil
		},
	}
	c.Flags().StringVarP(&out, "output", "o", "", "directory to write into")
	c.Flags().StringVar(&pinPath, "pin", "", "reproduce the version and bytes pinned by this file (flowcat.pin, or an older flowcat.lock)")
	c.Flags().StringVar(&pinPath, "lock", "", "the same as --pin")
	c.Flags().MarkHidden("lock")
	c.Flags().BoolVar(&replace, "replace", false, "replace what DIR holds when it is another dataset or version")
	return c
}

// printLoadLines ends a pull with how to load the version: one line per
// tool, run in DIR, with the dataset's wall-clock zone (asked of the
// server; UTC when it does not say) and where the fields are described.
func printLoadLines(cmd *cobra.Command, e *env, cl *client, r ref, out string) {
	if e.quiet {
		return
	}
	var d catalog.Dataset
	zone := "UTC"
	if err := cl.getJSON(cmd.Context(), r.path(), &d); err == nil && d.Timezone != "" {
		zone = d.Timezone
	}
	fmt.Fprintf(e.stdout, "\nload it, in %s (occurred_at is UTC; local_time is the dataset's clock, %s; the fields: flowcat schema, or DICTIONARY.md of flowcat bundle):\n", out, zone)
	for _, l := range export.LoadLines(zone) {
		fmt.Fprintf(e.stdout, "  %s (%s):\n    %s\n", l.Tool, l.Needs, l.Command)
	}
}

// pinMismatch is a pull --pin whose server bytes differ from the pin.
func pinMismatch(format string, args ...any) error {
	return &exitError{code: ExitRejected, err: fmt.Errorf("pull --pin: "+format, args...)}
}

// pull downloads version r into out. With want (a pin), the version must
// have want's snapshot id and files, checked before any file is written.
// A directory holding another dataset or version is refused unless
// replace.
func (e *env) pull(cmd *cobra.Command, cl *client, r ref, out string, want *pinFile, replace bool) (*pinFile, error) {
	ctx := cmd.Context()
	var v catalog.Version
	if err := cl.getJSON(ctx, r.versionPath(), &v); err != nil {
		return nil, err
	}
	dataset := r.Project + "/" + r.Dataset
	if want != nil && v.SnapshotID.String() != want.SnapshotID {
		return nil, pinMismatch("%s on %s has snapshot id %s, the pin says %s: the server's version differs", dataset, cl.base.Host, v.SnapshotID, want.SnapshotID)
	}
	if have, where := readPinIn(out); have != nil && !replace && (have.Dataset != dataset || have.SnapshotID != v.SnapshotID.String()) {
		return nil, &exitError{code: ExitRejected, err: fmt.Errorf("pull: %s holds %s@%d (snapshot %.16s…, per %s), not %s@%d: pass --replace to replace it, or pull into another directory",
			out, have.Dataset, have.Version, have.SnapshotID, where, dataset, v.Number)}
	}
	at := r.at(v.Number)
	resp, err := cl.do(ctx, http.MethodGet, at.versionPath()+"/manifest", nil, nil, nil)
	if err != nil {
		return nil, err
	}
	manifest, err := io.ReadAll(resp.Body)
	resp.Body.Close()
	if err != nil {
		return nil, fmt.Errorf("pull: manifest: %w", err)
	}
	if catalog.SnapshotOf(manifest) != v.SnapshotID {
		return nil, fmt.Errorf("pull: the manifest's sha256 %x is not the snapshot id %s", sha256.Sum256(manifest), v.SnapshotID)
	}
	// The file list comes from the manifest bytes just checked against the
	// snapshot id, not from the version's JSON.
	var m catalog.Manifest
	if err := json.Unmarshal(manifest, &m); err != nil {
		return nil, fmt.Errorf("pull: manifest: %w", err)
	}
	pin := &pinFile{PinVersion: 1, Dataset: dataset, Version: v.Number, SnapshotID: v.SnapshotID.String()}
	for _, f := range m.Blobs() {
		pin.Files = append(pin.Files, pinnedFile{Path: f.Path, SHA256: f.SHA256.String(), Bytes: f.Bytes, Rows: f.Rows})
	}
	var report []byte
	if q := m.Quality; q != nil {
		resp, err := cl.do(ctx, http.MethodGet, at.versionPath()+"/quality", nil, nil, nil)
		if err != nil {
			return nil, err
		}
		report, err = io.ReadAll(resp.Body)
		resp.Body.Close()
		if err != nil {
			return nil, fmt.Errorf("pull: quality report: %w", err)
		}
		if sha256.Sum256(report) != q.SHA256 {
			return nil, fmt.Errorf("pull: the quality report's sha256 %x is not the one the manifest names, %s", sha256.Sum256(report), q.SHA256)
		}
		pin.Files = append(pin.Files, pinnedFile{Path: qualityName, SHA256: q.SHA256.String(), Bytes: q.Bytes})
	}
	if want != nil {
		if err := matchPinFiles(want, pin.Files); err != nil {
			return nil, err
		}
	}
	keep := map[string]bool{}
	for _, f := range m.Blobs() {
		if !keep[f.Path] {
			// data/ for events, cases/ for the case table
			dst := filepath.Join(out, filepath.FromSlash(f.Path))
			if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
				return nil, err
			}
			if err := e.fetchFile(cmd, cl, at.versionPath()+"/files/"+f.SHA256.String(), dst, f); err != nil {
				return nil, err
			}
		}
		keep[f.Path] = true
	}
	if err := writeFileAtomic(filepath.Join(out, "manifest.json"), manifest); err != nil {
		return nil, err
	}
	if report != nil {
		if err := writeFileAtomic(filepath.Join(out, qualityName), report); err != nil {
			return nil, err
		}
	} else if err := os.Remove(filepath.Join(out, qualityName)); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}
	if err := writeFileAtomic(filepath.Join(out, pinName), marshalPin(pin)); err != nil {
		return nil, err
	}
	if err := os.Remove(filepath.Join(out, oldLockName)); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	}
	// Only now, with every file of this version here and its pin written,
	// remove files of another version pulled here before (only pull's own
	// data/<sha256>.parquet and cases/<sha256>.parquet files), which would
	// otherwise be read with it.
	for _, sub := range []string{"data", "cases"} {
		ents, err := os.ReadDir(filepath.Join(out, sub))
		if err != nil {
			continue
		}
		for _, de := range ents {
			name := strings.TrimSuffix(de.Name(), ".part")
			sha, _, _ := strings.Cut(name, ".")
			if _, err := blob.ParseID(sha); err == nil && !keep[sub+"/"+name] || strings.HasSuffix(de.Name(), ".part") && keep[sub+"/"+name] {
				if err := os.Remove(filepath.Join(out, sub, de.Name())); err != nil {
					return nil, err
				}
			}
		}
	}
	return pin, nil
}

// fetchFile downloads one file to dst, resuming a dst.part left by an
// interrupted pull with a Range request, and verifies its sha256.
func (e *env) fetchFile(cmd *cobra.Command, cl *client, path, dst string, f catalog.BlobEntry) error {
	want := f.SHA256.String()
	if got, err := fileSHA256(dst); err == nil && got == want {
		return nil // already here and whole
	}
	part := dst + ".part"
	var have int64
	if fi, err := os.Stat(part); err == nil && fi.Size() < f.Bytes {
		have = fi.Size()
	}
	hdr := http.Header{}
	if have > 0 {
		hdr.Set("Range", fmt.Sprintf("bytes=%d-", have))
		hdr.Set("If-Range", `"`+want+`"`)
	}
	resp, err := cl.do(cmd.Context(), http.MethodGet, path, nil, nil, hdr)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	flags := os.O_WRONLY | os.O_CREATE | os.O_TRUNC
	if resp.StatusCode == http.StatusPartialContent {
		flags = os.O_WRONLY | os.O_APPEND
	} else {
		have = 0
	}
	w, err := os.OpenFile(part, flags, 0o644)
	if err != nil {
		return err
	}
	var body io.Reader = resp.Body
	if e.tty() && !e.quiet && !e.json {
		bar := progressbar.NewOptions64(f.Bytes, progressbar.OptionSetWriter(e.stderr), progressbar.OptionShowBytes(true),
			progressbar.OptionSetDescription("pulling "+want[:12]), progressbar.OptionClearOnFinish())
		bar.Set64(have)
		pr := progressbar.NewReader(resp.Body, bar)
		body = &pr
	}
	if _, err := io.Copy(w, body); err != nil {
		w.Close()
		return fmt.Errorf("pull: %s: download interrupted after some bytes; run pull again to resume: %w", want[:12], err)
	}
	if err := w.Sync(); err != nil {
		w.Close()
		return err
	}
	if err := w.Close(); err != nil {
		return err
	}
	got, err := fileSHA256(part)
	if err != nil {
		return err
	}
	if got != want {
		os.Remove(part)
		return fmt.Errorf("pull: file %s arrived with sha256 %s: the bytes differ from the manifest", want, got)
	}
	return os.Rename(part, dst)
}

func fileSHA256(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", err
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

func writeFileAtomic(path string, data []byte) error {
	tmp := path + ".tmp"
	if err := os.WriteFile(tmp, data, 0o644); err != nil {
		return err
	}
	return os.Rename(tmp, path)
}

// matchPinFiles checks that files are exactly the pin's.
func matchPinFiles(want *pinFile, files []pinnedFile) error {
	if want.legacy {
		files = slices.DeleteFunc(slices.Clone(files), func(f pinnedFile) bool { return f.Path == qualityName })
	}
	if len(files) != len(want.Files) {
		return pinMismatch("the server's version has %d files, the pin %d", len(files), len(want.Files))
	}
	for i, f := range files {
		if w := want.Files[i]; w.SHA256 != f.SHA256 || w.Bytes != f.Bytes || w.Path != f.Path {
			return pinMismatch("file %d: the server has %s (%d bytes), the pin %s (%d bytes)", i+1, f.SHA256, f.Bytes, w.SHA256, w.Bytes)
		}
	}
	return nil
}

// readPinFile reads a pin (or an old lock file) by its path.
func readPinFile(path string) (*pinFile, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, usageErr("pin file: %v", err)
	}
	p, ok := decodePin(b)
	if !ok {
		return nil, usageErr("%s: not a flowcat pin file (pin_version 1, or lock_version 1, with dataset, version and snapshot id)", path)
	}
	return p, nil
}

// readPinIn returns the pin of a pulled directory and the file it came
// from: flowcat.pin, else an older flowcat.lock; nil when dir holds
// neither (or an unreadable one).
func readPinIn(dir string) (*pinFile, string) {
	for _, name := range []string{pinName, oldLockName} {
		if b, err := os.ReadFile(filepath.Join(dir, name)); err == nil {
			if p, ok := decodePin(b); ok {
				return p, name
			}
		}
	}
	return nil, ""
}

// readPin reads the pin of a pulled directory for verify.
func readPin(dir string) (*pinFile, string, error) {
	if _, err := os.Stat(dir); err != nil {
		return nil, "", usageErr("%s: no such directory", dir)
	}
	p, name := readPinIn(dir)
	if p != nil {
		return p, name, nil
	}
	for _, name := range []string{pinName, oldLockName} {
		if _, err := os.Stat(filepath.Join(dir, name)); err == nil {
			return nil, "", fmt.Errorf("%s: not a flowcat pin file", filepath.Join(dir, name))
		}
	}
	return nil, "", fmt.Errorf("%s: no %s here: not a pulled version, or its pin was removed", dir, pinName)
}
