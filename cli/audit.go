package cli

import (
	"context"
	"fmt"
	"io"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// auditFlags are the filters of flowcat audit and audit export.
type auditFlags struct {
	dir                                        string
	from, to                                   string
	subject, action, project, dataset, outcome string
	limit                                      int
	after                                      string
}

func (f *auditFlags) add(c *cobra.Command, paged bool) {
	fl := c.Flags()
	fl.StringVar(&f.dir, "data", "", "data directory (server stopped); else the API")
	fl.StringVar(&f.from, "from", "", "entries at or after this RFC 3339 instant")
	fl.StringVar(&f.to, "to", "", "entries before this RFC 3339 instant")
	fl.StringVar(&f.subject, "subject", "", "entries by this token subject")
	fl.StringVar(&f.action, "action", "", `an action ("version.publish") or, ending in ".", a kind ("token.")`)
	fl.StringVar(&f.project, "project", "", "entries about this project")
	fl.StringVar(&f.dataset, "dataset", "", "entries about this dataset (with --project)")
	fl.StringVar(&f.outcome, "outcome", "", "ok or denied")
	if paged {
		fl.IntVar(&f.limit, "limit", catalog.DefaultAuditPage, fmt.Sprintf("entries per page (at most %d)", catalog.MaxAuditPage))
		fl.StringVar(&f.after, "after", "", "the id of the last entry of the previous page")
	}
}

func (f *auditFlags) query() url.Values {
	q := url.Values{}
	for k, v := range map[string]string{"from": f.from, "to": f.to, "subject": f.subject, "action": f.action,
		"project": f.project, "dataset": f.dataset, "outcome": f.outcome, "after": f.after} {
		if v != "" {
			q.Set(k, v)
		}
	}
	if f.limit > 0 {
		q.Set("limit", strconv.Itoa(f.limit))
	}
	return q
}

func (f *auditFlags) filter() (catalog.AuditFilter, error) {
	af := catalog.AuditFilter{Subject: f.subject, Action: f.action, Project: f.project, Dataset: f.dataset,
		Outcome: f.outcome, After: f.after, Limit: f.limit}
	if err := parseInstants("", instantFlag{"--from", f.from, &af.From}, instantFlag{"--to", f.to, &af.To}); err != nil {
		return af, err
	}
	if err := af.Validate(); err != nil {
		return af, usageErr("%v", err)
	}
	return af, nil
}

// withStore runs fn on the catalog of f.dir, opened while no server holds
// it.
func (f *auditFlags) withStore(ctx context.Context, fn func(*catalog.Store) error) error {
	st, err := dataDir(f.dir).openForTokens()
	if err != nil {
		return lockedHint(err, "flowcat audit")
	}
	defer st.Close()
	return fn(st)
}

func newAuditCmd(e *env) *cobra.Command {
	var f auditFlags
	c := &cobra.Command{
		Use:   "audit [--data DIR | --server URL --token T] [filters]",
		Short: "Show the audit trail: who uploaded, published, withdrew, downloaded, issued, revoked, changed what, when",
		Long: `Show one page of the audit trail, oldest first. Admins see every entry, curators
their project's. The next page starts --after the id printed at the end.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			var page api.AuditPage
			if f.dir != "" {
				af, err := f.filter()
				if err != nil {
					return err
				}
				err = f.withStore(cmd.Context(), func(st *catalog.Store) error {
					page.Entries, page.NextAfter, err = st.AuditPage(cmd.Context(), af)
					return err
				})
				if err != nil {
					return err
				}
			} else {
				cl, err := e.client()
				if err != nil {
					return err
				}
				if err := cl.getJSONQuery(cmd.Context(), "/audit", f.query(), &page); err != nil {
					return err
				}
			}
			if e.json {
				if page.Entries == nil {
					page.Entries = []catalog.AuditEntry{}
				}
				return writeJSON(e.stdout, page)
			}
			printAudit(e.stdout, page.Entries)
			if page.NextAfter != "" {
				fmt.Fprintf(e.stderr, "more entries: --after %s\n", page.NextAfter)
			}
			return nil
		},
	}
	f.add(c, true)
	c.AddCommand(newAuditExportCmd(e))
	return c
}

func printAudit(w io.Writer, es []catalog.AuditEntry) {
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "AT\tBY\tJTI\tFROM\tACTION\tTARGET\tOUTCOME\tDETAIL")
	for _, a := range es {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", a.At.UTC().Format(time.RFC3339Nano), orDash(a.By), orDash(a.TokenID), orDash(a.From),
			a.Action, orDash(a.Target), a.Outcome, orDash(a.Detail))
	}
	tw.Flush()
}

func newAuditExportCmd(e *env) *cobra.Command {
	var f auditFlags
	var out string
	c := &cobra.Command{
		Use:   "export -o FILE [--data DIR | --server URL --token T] [filters]",
		Short: "Write the audit entries the filters select as JSON Lines (- for stdout)",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if out == "" {
				return usageErr("audit export: -o FILE is required (- for stdout)")
			}
			w, finish, err := createOutput(e, out)
			if err != nil {
				return err
			}
			n := 0
			if f.dir != "" {
				af, err := f.filter()
				if err != nil {
					finish(false)
					return err
				}
				af.Limit = catalog.MaxAuditPage
				err = f.withStore(cmd.Context(), func(st *catalog.Store) error {
					n, err = st.WriteAuditJSONL(cmd.Context(), w, af)
					return err
				})
				if err != nil {
					finish(false)
					return err
				}
			} else {
				cl, err := e.client()
				if err != nil {
					finish(false)
					return err
				}
				resp, err := cl.do(cmd.Context(), "GET", "/audit/export", f.query(), nil, nil)
				if err != nil {
					finish(false)
					return err
				}
				defer resp.Body.Close()
				cw := &lineCounter{w: w}
				if _, err := io.Copy(cw, resp.Body); err != nil {
					finish(false)
					return fmt.Errorf("audit export: %w", err)
				}
				n = cw.lines
			}
			if err := finish(true); err != nil {
				return err
			}
			if out != "-" && !e.quiet {
				fmt.Fprintf(e.stderr, "wrote %d audit entries to %s\n", n, out)
			}
			return nil
		},
	}
	f.add(c, false)
	c.Flags().StringVarP(&out, "output", "o", "", "file to write (- for stdout)")
	return c
}

// createOutput opens path for writing whole or not at all (a temporary
// file renamed by finish(true)); "-" is stdout.
func createOutput(e *env, path string) (io.Writer, func(ok bool) error, error) {
	if path == "-" {
		return e.stdout, func(bool) error { return nil }, nil
	}
	f, err := os.CreateTemp(filepath.Dir(path), ".flowcat-audit-*")
	if err != nil {
		return nil, nil, err
	}
	return f, func(ok bool) error {
		if !ok {
			f.Close()
			os.Remove(f.Name())
			return nil
		}
		err := f.Sync()
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		if err == nil {
			err = os.Rename(f.Name(), path)
		}
		if err != nil {
			os.Remove(f.Name())
		}
		return err
	}, nil
}

type lineCounter struct {
	w     io.Writer
	lines int
}

func (c *lineCounter) Write(p []byte) (int, error) {
	for _, b := range p {
		if b == '\n' {
			c.lines++
		}
	}
	return c.w.Write(p)
}
