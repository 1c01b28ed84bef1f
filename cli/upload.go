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
)

type uploadAnswer struct {
	Upload  catalog.Upload   `json:"upload"`
	Version *catalog.Version `json:"version,omitempty"`
}

func newUploadCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "upload PROJECT/DATASET FILE",
		Short: "Upload one export file (CSV, TSV or JSON Lines, maybe gzip) to a dataset",
		Long: `Upload streams FILE to the server, which checks it through the dataset's profile,
pseudonymizes it and, if it passes, makes a new version. Sending the same file again returns the
version it made the first time. Exit 0: accepted (or a duplicate); 1: rejected, with the reason.`,
		Args: cobra.ExactArgs(2),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], false)
			if err != nil {
				return err
			}
			cl, err := e.client()
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
			ans, err := e.uploadFile(cmd, cl, r, f, filepath.Base(args[1]), fi.Size())
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
}

// uploadFile streams body to the dataset; a rejection comes back as an
// exit-1 error after the report is printed (or written as JSON).
func (e *env) uploadFile(cmd *cobra.Command, cl *client, r ref, body io.Reader, name string, size int64) (*uploadAnswer, error) {
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
	resp, err := cl.do(cmd.Context(), http.MethodPost, r.path()+"/uploads", url.Values{"filename": {name}}, rd, hdr)
	var ae *apiError
	if errors.As(err, &ae) && len(ae.Upload) > 0 {
		var up catalog.Upload
		if json.Unmarshal(ae.Upload, &up) == nil {
			if e.json {
				writeJSON(e.stdout, map[string]any{"error": ae, "upload": up})
				return nil, errSilent
			}
			printRejected(e.stderr, name, ae, &up)
			return nil, errSilent
		}
	}
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	var ans uploadAnswer
	if err := json.NewDecoder(resp.Body).Decode(&ans); err != nil {
		return nil, fmt.Errorf("upload: reading answer: %w", err)
	}
	return &ans, nil
}

func printUpload(w io.Writer, r ref, a *uploadAnswer) {
	u := a.Upload
	if u.Status == catalog.UploadDuplicate {
		fmt.Fprintf(w, "%s: identical to an earlier upload; it is version %d (nothing new stored)\n", r, u.Version)
		return
	}
	v := a.Version
	fmt.Fprintf(w, "%s@%d created from upload %s: %d rows accepted, %d rejected, quality score %s\n",
		r, v.Number, u.ID, u.Report.Rows.Accepted, u.Report.Rows.Rejected, score(u.Report.Score))
	fmt.Fprintf(w, "snapshot %s (%d files, %d rows in all)\n", v.SnapshotID, len(v.Manifest.Files), v.Manifest.Rows)
	if len(u.Unmapped) > 0 {
		fmt.Fprintf(w, "dropped unmapped columns: %s\n", strings.Join(u.Unmapped, ", "))
	}
}

func printRejected(w io.Writer, name string, ae *apiError, u *catalog.Upload) {
	fmt.Fprintf(w, "rejected: %s\n", ae.Message)
	if u.Report != nil {
		u.Report.Text(w, false)
	}
}
