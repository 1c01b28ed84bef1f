package cli

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"net/url"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/schema/synth"
)

// The demo's invented scenario: a project of the invented Quillon Bay
// Health network with one dataset per partner site.
const demoProject = "quillon-flow"

var demoDatasets = []struct{ site, dataset, title, ext string }{
	{"qb-walkin", "walkin-visits", "Quillon Bay walk-in clinic: visits", "csv"},
	{"qb-nurseline", "nurseline-calls", "Quillon Bay nurse advice line: calls", "jsonl"},
}

func newDemoCmd(e *env) *cobra.Command {
	var dir, addr string
	var days int
	var seed uint64
	c := &cobra.Command{
		Use:   "demo [--data DIR] [--addr HOST:PORT]",
		Short: "Run a server with an invented week of clinic and phone-line data",
		Long: `Demo starts a server on a fresh data directory, creates the invented Quillon Bay Health
scenario (a walk-in clinic and a nurse advice line; every name and event is made up), generates
a week of events with a few planted defects, ingests them as nightly uploads through the HTTP
API, prints the URL, a token per role and the commands to pull a snapshot, and serves until
interrupted.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if days < 1 || days > 366 {
				return usageErr("demo: --days must be 1 to 366")
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), syscall.SIGINT, syscall.SIGTERM)
			defer stop()
			if dir == "" {
				tmp, err := os.MkdirTemp("", "flowcat-demo-*")
				if err != nil {
					return err
				}
				dir = tmp
			} else if ents, err := os.ReadDir(dir); err == nil && len(ents) > 0 {
				return usageErr("demo: %s is not empty; give a new or empty directory", dir)
			} else if err != nil && !errors.Is(err, fs.ErrNotExist) {
				return err
			}
			d := dataDir(dir)
			if _, err := initDataDir(d, "", ""); err != nil {
				return err
			}
			out := e.stdout
			fmt.Fprintf(out, "flowcat demo: every site, name and event below is invented.\n")
			fmt.Fprintf(out, "data directory %s\n", dir)
			fmt.Fprintf(out, "the demo made its own master key at %s (fine for a demo; keep real keys apart from the data)\n\n", d.masterKey())

			logw := io.Discard
			if !e.quiet {
				logw = e.stderr
			}
			log := slog.New(slog.NewTextHandler(logw, &slog.HandlerOptions{Level: slog.LevelWarn}))
			run, err := startServer(ctx, d, addr, "", serverOptions{citationAuthor: "Quillon Bay Health operations study (invented)"}, log)
			if err != nil {
				return err
			}
			tokens, err := demoTokens(run)
			if err != nil {
				run.close()
				return err
			}
			if err := e.seedDemo(cmd, run.url, tokens, days, seed); err != nil {
				stop()
				run.wait(ctx)
				return err
			}
			printDemoHelp(out, run.url, tokens)
			return run.wait(ctx)
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory to create (default: a new temporary directory)")
	c.Flags().StringVar(&addr, "addr", "127.0.0.1:8470", "listen address HOST:PORT")
	c.Flags().IntVar(&days, "days", 7, "nights of uploads to generate")
	c.Flags().Uint64Var(&seed, "seed", 20261202, "random seed of the generated scenario")
	return c
}

type demoTokenSet struct{ admin, curator, member, partner string }

func demoTokens(run *running) (demoTokenSet, error) {
	var t demoTokenSet
	var parts []string
	for _, d := range demoDatasets {
		parts = append(parts, demoProject+"/"+d.dataset)
	}
	for _, g := range []struct {
		dst  *string
		role string
		sub  string
	}{
		{&t.admin, "admin", "demo-admin"},
		{&t.curator, "curator", "demo-curator"},
		{&t.member, "member", "demo-student"},
		{&t.partner, "partner", "demo-partner-uploader"},
	} {
		tok, err := run.auth.IssueRecorded(context.Background(), run.store, operator, grantFor(g.role, g.sub, demoProject, parts, 24*time.Hour))
		if err != nil {
			return t, err
		}
		*g.dst = tok
	}
	return t, nil
}

// seedDemo creates the project and datasets as the curator would and sends
// every night's export as the partner would, through the HTTP API.
func (e *env) seedDemo(cmd *cobra.Command, base string, t demoTokenSet, days int, seed uint64) error {
	ctx := cmd.Context()
	admin := &env{stdout: io.Discard, stderr: e.stderr, server: base, token: t.admin, quiet: true}
	cl, err := admin.client()
	if err != nil {
		return err
	}
	if err := cl.postJSON(ctx, "/projects", map[string]string{"name": demoProject, "title": "Quillon Bay Health patient-flow study (invented)"}, nil); err != nil {
		return err
	}
	// The week ends yesterday, so no event lies after its upload.
	today := time.Now().UTC().Truncate(24 * time.Hour)
	first := today.AddDate(0, 0, -days)
	sc := synth.QuillonBay(seed, first, days)
	cur := &env{stdout: io.Discard, stderr: e.stderr, server: base, token: t.curator, quiet: true}
	ccl, _ := cur.client()
	for _, d := range demoDatasets {
		req := map[string]any{"name": d.dataset, "title": d.title, "profile": string(sc.Profile(d.site))}
		if err := ccl.postJSON(ctx, "/projects/"+demoProject+"/datasets", req, nil); err != nil {
			return fmt.Errorf("demo: creating %s: %w", d.dataset, err)
		}
	}
	part := &env{stdout: io.Discard, stderr: io.Discard, server: base, token: t.partner, quiet: true}
	pcl, _ := part.client()
	fmt.Fprintf(e.stdout, "nightly uploads through %s/api/v1:\n", base)
	for day := 0; day < days; day++ {
		for _, d := range demoDatasets {
			var buf bytes.Buffer
			st, err := sc.Night(d.site, day, &buf)
			if err != nil {
				return fmt.Errorf("demo: generating %s day %d: %w", d.site, day, err)
			}
			name := fmt.Sprintf("%s-%s.%s", d.site, first.AddDate(0, 0, day).Format("2006-01-02"), d.ext)
			r := ref{Project: demoProject, Dataset: d.dataset}
			ans, err := part.uploadFile(cmd, pcl, r, &buf, url.Values{"filename": {name}}, int64(buf.Len()))
			if err != nil {
				if errors.Is(err, errSilent) {
					fmt.Fprintf(e.stdout, "  %-34s %5d events: rejected\n", name, st.Events)
					continue
				}
				return fmt.Errorf("demo: uploading %s: %w", name, err)
			}
			rep := ans.Upload.Report
			fmt.Fprintf(e.stdout, "  %-34s %5d rows -> %s@%d  (%d rejected, score %s)\n",
				name, rep.Rows.Total, r, ans.Version.Number, rep.Rows.Rejected, score(rep.Score))
		}
	}
	return nil
}

func printDemoHelp(w io.Writer, url string, t demoTokenSet) {
	fmt.Fprintf(w, `
serving at %[1]s

tokens (valid 24 hours):
  admin    %[2]s
  curator  %[3]s   (project %[6]s)
  member   %[4]s   (a student: reads %[6]s)
  partner  %[5]s   (uploads to both datasets)

as a student, in another shell:
  export FLOWCAT_SERVER=%[1]s
  export FLOWCAT_TOKEN=%[4]s
  flowcat versions %[6]s/walkin-visits
  flowcat quality %[6]s/walkin-visits@latest
  flowcat summary %[6]s/walkin-visits
  flowcat quality %[6]s/walkin-visits --trend
  flowcat pull %[6]s/walkin-visits@latest -o walkin-snapshot
  flowcat verify walkin-snapshot

or in a browser: open %[1]s/ and paste the member token to sign in
  (it is kept in a cookie for this server only, never in an address)

Press Ctrl-C to stop.
`, url, t.admin, t.curator, t.member, t.partner, demoProject)
}
