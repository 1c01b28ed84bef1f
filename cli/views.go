package cli

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"os"
	"path/filepath"
	"strings"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/summary"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// filterFlags are the event filters of summary, export and diff.
type filterFlags struct {
	from, to                         string
	sites, queues, types, activities []string
	columns                          []string
}

func (f *filterFlags) add(c *cobra.Command, withTypes, withColumns bool) {
	fl := c.Flags()
	fl.StringVar(&f.from, "from", "", "only events at or after this RFC 3339 instant, or date (the start of that day in the dataset's zone)")
	fl.StringVar(&f.to, "to", "", "only events before this RFC 3339 instant, or date (the start of that day in the dataset's zone)")
	fl.StringSliceVar(&f.sites, "site", nil, "only these sites (repeatable or comma-separated)")
	fl.StringSliceVar(&f.queues, "queue", nil, "only these queues")
	fl.StringSliceVar(&f.activities, "activity", nil, "only these activities")
	if withTypes {
		fl.StringSliceVar(&f.types, "type", nil, "only these event types")
	}
	if withColumns {
		fl.StringSliceVar(&f.columns, "columns", nil, "only these columns (schema field names)")
	}
}

// query returns the filters as query parameters; the server checks them.
func (f *filterFlags) query() url.Values {
	q := url.Values{}
	if f.from != "" {
		q.Set("from", f.from)
	}
	if f.to != "" {
		q.Set("to", f.to)
	}
	for k, v := range map[string][]string{"site": f.sites, "queue": f.queues, "type": f.types, "activity": f.activities, "columns": f.columns} {
		if len(v) > 0 {
			q.Set(k, strings.Join(v, ","))
		}
	}
	return q
}

func newSummaryCmd(e *env) *cobra.Command {
	var ff filterFlags
	c := &cobra.Command{
		Use:   "summary PROJECT/DATASET[@VERSION] [filters]",
		Short: "Show a version's arrivals, waits, services, stays, occupancy",
		Long: `Summary prints the summary stored with a version. With --site, --from or --to the server computes
it from the version's files for those events only; --queue and --activity restrict the queue and
activity tables. The figures describe past operations; they are not advice on any patient's care.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, cl, err := e.connect(args[0], true)
			if err != nil {
				return err
			}
			if err := ff.resolveDates(cmd.Context(), cl, r, e.stderr); err != nil {
				return err
			}
			resp, err := cl.do(cmd.Context(), http.MethodGet, r.versionPath()+"/summary", ff.query(), nil, nil)
			if err != nil {
				return err
			}
			defer resp.Body.Close()
			b, err := io.ReadAll(resp.Body)
			if err != nil {
				return fmt.Errorf("summary: %w", err)
			}
			if e.json {
				_, err := e.stdout.Write(append(b, '\n'))
				return err
			}
			var s summary.Summary
			if err := json.Unmarshal(b, &s); err != nil {
				return fmt.Errorf("summary: %w", err)
			}
			fmt.Fprintf(e.stdout, "%s\n\n", r)
			return s.Text(e.stdout, e.tty())
		},
	}
	ff.add(c, false, false)
	return c
}

// download writes the body of a GET to path (or stdout for "-"),
// atomically for files.
func (e *env) download(cmd *cobra.Command, cl *client, path string, q url.Values, out string) (int64, error) {
	resp, err := cl.do(cmd.Context(), http.MethodGet, path, q, nil, nil)
	if err != nil {
		return 0, err
	}
	defer resp.Body.Close()
	if out == "-" {
		return io.Copy(e.stdout, resp.Body)
	}
	tmp, err := os.CreateTemp(filepath.Dir(out), ".flowcat-*")
	if err != nil {
		return 0, usageErr("%v", err)
	}
	defer os.Remove(tmp.Name())
	n, err := io.Copy(tmp, resp.Body)
	if err != nil {
		tmp.Close()
		return n, fmt.Errorf("download interrupted after %d bytes: %w", n, err)
	}
	if err := tmp.Close(); err != nil {
		return n, err
	}
	return n, os.Rename(tmp.Name(), out)
}

func newExportCmd(e *env) *cobra.Command {
	var ff filterFlags
	var out, format, layout string
	c := &cobra.Command{
		Use:   "export PROJECT/DATASET[@VERSION] (-o FILE | --layout DIR|s3://B/P) [flags]",
		Short: "Download a version, or chosen events, as Parquet, CSV or XES, or as a layout",
		Long: `Export writes one file holding a version's events in a fixed order (time, then content): the same
request always gives the same bytes. Filters keep a time window, sites, queues, event types,
activities and columns; the server reads only the row groups they need. CSV follows RFC 4180.
-o - writes to stdout.

With --layout, export writes the whole version as Parquet files partitioned Hive-style by site and
day (site=SITE/date=YYYY-MM-DD/part-0.parquet, days in the dataset's zone), with the version's
manifest.json and a layout.json listing every file, into a new directory or under an S3 prefix
that holds nothing yet (endpoint and keys from the environment, as for serve --blobs). Query
engines read it in place and read only the partitions a query's site and date conditions name.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], true)
			if err != nil {
				return err
			}
			if layout != "" {
				if out != "" || cmd.Flags().Changed("format") || len(ff.query()) > 0 {
					return usageErr("export: --layout writes the whole version; it takes no -o, --format or filters")
				}
				return e.exportLayout(cmd, r, layout)
			}
			if out == "" {
				return usageErr("export: -o FILE is required (- for stdout)")
			}
			if format != "parquet" && format != "csv" && format != "xes" {
				return usageErr("export: --format %q: want parquet, csv or xes", format)
			}
			if ff.from != "" || ff.to != "" {
				cl, err := e.client()
				if err != nil {
					return err
				}
				if err := ff.resolveDates(cmd.Context(), cl, r, e.stderr); err != nil {
					return err
				}
			}
			q := ff.query()
			q.Set("format", format)
			return e.saveVersion(cmd, r, "/export", q, format, out)
		},
	}
	ff.add(c, true, true)
	c.Flags().StringVarP(&out, "output", "o", "", "file to write (- for stdout)")
	c.Flags().StringVar(&format, "format", "parquet", "parquet, csv or xes (IEEE 1849-2016 XES: a trace per case)")
	c.Flags().StringVar(&layout, "layout", "", "write a partitioned layout (site=/date=) into this new directory or s3://BUCKET/PREFIX")
	return c
}

func newBundleCmd(e *env) *cobra.Command {
	var out, format string
	c := &cobra.Command{
		Use:   "bundle PROJECT/DATASET[@VERSION] -o FILE [--format tar|zip]",
		Short: "Download a version as one archive, with README and citation",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], true)
			if err != nil {
				return err
			}
			if out == "" {
				return usageErr("bundle: -o FILE is required (- for stdout)")
			}
			if format != "tar" && format != "zip" {
				return usageErr("bundle: --format %q: want tar or zip", format)
			}
			return e.saveVersion(cmd, r, "/bundle", url.Values{"format": {format}}, format, out)
		},
	}
	c.Flags().StringVarP(&out, "output", "o", "", "file to write (- for stdout)")
	c.Flags().StringVar(&format, "format", "tar", "tar or zip")
	return c
}

func newCiteCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "cite PROJECT/DATASET[@VERSION]",
		Short: "Print a version's CITATION.cff (Citation File Format 1.2.0)",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, cl, err := e.connect(args[0], true)
			if err != nil {
				return err
			}
			if !e.json {
				_, err = e.download(cmd, cl, r.versionPath()+"/citation", nil, "-")
				return err
			}
			var v catalog.Version
			if err := cl.getJSON(cmd.Context(), r.versionPath(), &v); err != nil {
				return err
			}
			resp, err := cl.do(cmd.Context(), http.MethodGet, r.at(v.Number).versionPath()+"/citation", nil, nil, nil)
			if err != nil {
				return err
			}
			defer resp.Body.Close()
			cff, err := io.ReadAll(resp.Body)
			if err != nil {
				return fmt.Errorf("cite: %w", err)
			}
			c, err := citationJSON(&v, cff)
			if err != nil {
				return err
			}
			return writeJSON(e.stdout, c)
		},
	}
}

func newDiffCmd(e *env) *cobra.Command {
	var ff filterFlags
	c := &cobra.Command{
		Use:   "diff PROJECT/DATASET@A PROJECT/DATASET@B [filters]",
		Short: "Compare two versions: events, quality and summary",
		Args:  cobra.ExactArgs(2),
		RunE: func(cmd *cobra.Command, args []string) error {
			a, err := parseRef(args[0], true)
			if err != nil {
				return err
			}
			b, err := parseRef(args[1], true)
			if err != nil {
				return err
			}
			if a.Project != b.Project || a.Dataset != b.Dataset {
				return usageErr("diff: both versions must be of one dataset, not %s and %s", a.Project+"/"+a.Dataset, b.Project+"/"+b.Dataset)
			}
			sel := func(r ref) string {
				if r.Selector == "" {
					return "latest"
				}
				return r.Selector
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			if err := ff.resolveDates(cmd.Context(), cl, a, e.stderr); err != nil {
				return err
			}
			q := ff.query()
			q.Set("a", sel(a))
			q.Set("b", sel(b))
			resp, err := cl.do(cmd.Context(), http.MethodGet, a.path()+"/diff", q, nil, nil)
			if err != nil {
				return err
			}
			defer resp.Body.Close()
			var d api.Diff
			raw, err := io.ReadAll(resp.Body)
			if err != nil {
				return err
			}
			if e.json {
				_, err := e.stdout.Write(append(raw, '\n'))
				return err
			}
			if err := json.Unmarshal(raw, &d); err != nil {
				return fmt.Errorf("diff: %w", err)
			}
			printDiff(e.stdout, a.Project+"/"+a.Dataset, &d)
			return nil
		},
	}
	ff.add(c, true, false)
	return c
}
