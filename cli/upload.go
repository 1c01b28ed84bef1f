package cli

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// uploadFlags are upload's mode options.
type uploadFlags struct {
	mode, from, to string
	sites          []string
}

// query checks the flags and returns them as upload query parameters.
func (f *uploadFlags) query(name string) (url.Values, error) {
	q := url.Values{"filename": {name}}
	opt := catalog.IngestOptions{Mode: catalog.Mode(f.mode), Sites: f.sites}
	if err := parseInstants("upload: ", instantFlag{"--from", f.from, &opt.From}, instantFlag{"--to", f.to, &opt.To}); err != nil {
		return nil, err
	}
	if err := opt.Validate(); err != nil {
		return nil, usageErr("upload: %s", strings.TrimSuffix(err.Error(), ": "+catalog.ErrInvalid.Error()))
	}
	if f.mode != "" {
		q.Set("mode", f.mode)
	}
	if f.from != "" {
		q.Set("from", f.from)
		q.Set("to", f.to)
	}
	for _, s := range f.sites {
		q.Add("site", s)
	}
	return q, nil
}

func newUploadCmd(e *env) *cobra.Command {
	var uf uploadFlags
	c := &cobra.Command{
		Use:   "upload PROJECT/DATASET FILE",
		Short: "Upload one export file (CSV, TSV or JSON Lines, maybe gzip)",
		Long: `Upload streams FILE to the server, which checks it through the dataset's profile,
pseudonymizes it and, if it passes, makes a new version. A version holds each event once: events
the latest version already holds, and copies within the file, are not stored again, and the answer
counts them ("v12: 41,003 new events, 287,110 already held, 0 changed"). A file of held events
only (or the same file again) makes no version. Exit 0: accepted (or a duplicate); 1: rejected,
with the reason.

--mode says how the file's events combine with the latest version:
  append          add them (the default)
  replace-window  remove the latest version's events of the file's sites (or --site) between
                  --from and --to, then add the file's, which must all lie in that window
  replace-all     the file's events become the whole new version
Every mode makes a new immutable version whose lineage names its parent, upload and mode.`,
		Args: cobra.ExactArgs(2),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, cl, err := e.connect(args[0], false)
			if err != nil {
				return err
			}
			f, err := os.Open(args[1])
			if err != nil {
				return usageErr("upload: %v", err)
			}
			defer f.Close()
			fi, err := f.Stat()
			if err != nil {
				return err
			}
			from := &struct{ name, value string }{"from", uf.from}
			to := &struct{ name, value string }{"to", uf.to}
			if err := instantFlags(cmd.Context(), cl, r, e.stderr, from, to); err != nil {
				return err
			}
			uf.from, uf.to = from.value, to.value
			q, err := uf.query(filepath.Base(args[1]))
			if err != nil {
				return err
			}
			ans, err := e.uploadFile(cmd, cl, r, f, q, fi.Size())
			if err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, ans)
			}
			printUpload(e.stdout, r, ans)
			return nil
		},
	}
	c.Flags().StringVar(&uf.mode, "mode", "", "append, replace-window or replace-all (default append)")
	c.Flags().StringVar(&uf.from, "from", "", "replace-window: start of the window, RFC 3339 or a date (its start in the dataset's zone; inclusive)")
	c.Flags().StringVar(&uf.to, "to", "", "replace-window: end of the window, RFC 3339 or a date (its start in the dataset's zone; exclusive)")
	c.Flags().StringSliceVar(&uf.sites, "site", nil, "replace-window: a site whose events are replaced (repeatable; default the file's sites)")
	return c
}

// uploadFile streams body to the dataset; a rejection comes back as an
// exit-1 error after the report is printed (or written as JSON).
func (e *env) uploadFile(cmd *cobra.Command, cl *client, r ref, body io.Reader, q url.Values, size int64) (*api.UploadResult, error) {
	name := q.Get("filename")
	var rd io.Reader = body
	if e.tty() && !e.quiet && !e.json {
		bar := progressbar.NewOptions64(size,
			progressbar.OptionSetWriter(e.stderr), progressbar.OptionShowBytes(true),
			progressbar.OptionSetDescription("uploading "+name), progressbar.OptionClearOnFinish(),
			progressbar.OptionThrottle(100_000_000))
		pr := progressbar.NewReader(body, bar)
		rd = &pr
	}
	hdr := http.Header{"Content-Type": {"application/octet-stream"}, "Content-Length": {strconv.FormatInt(size, 10)}}
	resp, err := cl.do(cmd.Context(), http.MethodPost, r.path()+"/uploads", q, rd, hdr)
	var ae *apiError
	if errors.As(err, &ae) && ae.Upload != nil {
		if e.json {
			writeJSON(e.stdout, map[string]any{"error": ae, "upload": ae.Upload})
			return nil, errSilent
		}
		printRejected(e.stderr, name, ae, ae.Upload)
		return nil, errSilent
	}
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	var ans api.UploadResult
	if err := json.NewDecoder(resp.Body).Decode(&ans); err != nil {
		return nil, fmt.Errorf("upload: reading answer: %w", err)
	}
	return &ans, nil
}

func printUpload(w io.Writer, r ref, a *api.UploadResult) {
	u := a.Upload
	if u.Status == catalog.UploadDuplicate {
		fmt.Fprintf(w, "%s: %s\n", r, u.Sentence())
		if u.Report != nil {
			u.Report.TextRejections(w, false)
		}
		printAlerts(w, &u)
		return
	}
	v := a.Version
	if s := u.Sentence(); s != "" {
		fmt.Fprintln(w, s)
	}
	if l := v.Manifest.Lineage; l.Mode != catalog.ModeAppend && l.Mode != "" {
		fmt.Fprintf(w, "%s: %s removed %d rows of version %d\n", r, l.Mode, l.RowsRemoved, v.Manifest.Parent)
	}
	// Rows accepted are the upload's valid rows, copies and held events
	// included (the line above says what became of them); the report's
	// own row count is of the events it judged, after copies.
	accepted := u.Report.Rows.Accepted
	if u.Events != nil {
		accepted = u.Events.Read
	}
	fmt.Fprintf(w, "%s@%d created from upload %s: %d rows accepted, %d rejected%s, quality score %s\n",
		r, v.Number, u.ID, accepted, u.Report.Rows.Rejected, u.RejectedNote(), score(u.Report.Score))
	fmt.Fprintf(w, "snapshot %s (%d files, %d rows in all)\n", v.SnapshotID, len(v.Manifest.Files), v.Manifest.Rows)
	if len(u.Unmapped) > 0 {
		fmt.Fprintf(w, "dropped unmapped columns: %s\n", strings.Join(u.Unmapped, ", "))
	}
	printAlerts(w, &u)
}

func printAlerts(w io.Writer, u *catalog.Upload) {
	for _, a := range u.Alerts {
		fmt.Fprintf(w, "alert %s at %s: %s\n", a.Code, a.Site, quality.WrapText(a.Sentence, 72, "  "))
	}
}

func printRejected(w io.Writer, name string, ae *apiError, u *catalog.Upload) {
	fmt.Fprintf(w, "rejected: %s\n", ae.Message)
	if u.Report != nil {
		u.Report.Text(w, false)
	}
}
