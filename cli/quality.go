package cli

import (
	"encoding/json"
	"fmt"
	"io"
	"net/url"
	"slices"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/quality"
	"github.com/flowcat-catalog/flowcat/server/api"
)

func newQualityCmd(e *env) *cobra.Command {
	var trend bool
	var site string
	c := &cobra.Command{
		Use:   "quality PROJECT/DATASET[@VERSION] | quality PROJECT/DATASET --trend [--site S]",
		Short: "Show a version's quality report, or the trend over uploads",
		Long: `Quality prints a version's report: its five dimensions (completeness, accuracy, consistency,
currentness, uniqueness) with their findings, over all the version's files. quality/SCORING.md in
the source gives every formula.

With --trend it prints, per site, the score and sub-scores of every upload (accepted or rejected)
in order, with the drift alerts: an upload below its site's recent range, or a field whose
completeness dropped (an export that lost a column).`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], !trend)
			if err != nil {
				return err
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			if trend {
				q := url.Values{}
				if site != "" {
					q.Set("site", site)
				}
				var t api.Trend
				resp, err := cl.do(cmd.Context(), "GET", r.path()+"/quality/trend", q, nil, nil)
				if err != nil {
					return err
				}
				defer resp.Body.Close()
				if err := decodeBody(resp.Body, &t); err != nil {
					return err
				}
				if e.json {
					return writeJSON(e.stdout, t)
				}
				pts := make([]quality.TrendPoint, len(t.Points))
				for i, p := range t.Points {
					pts[i] = p.TrendPoint
				}
				var alerts []quality.Alert
				for _, a := range t.Alerts {
					alerts = append(alerts, a.Alert)
				}
				if len(pts) == 0 && site != "" && site != quality.AllSites {
					return e.unknownSite(cmd, cl, r, site)
				}
				if len(pts) == 0 {
					fmt.Fprintf(e.stdout, "%s: no upload with a report yet\n", r)
					return nil
				}
				return quality.WriteTrend(e.stdout, pts, alerts, e.tty())
			}
			if site != "" {
				return usageErr("quality: --site goes with --trend")
			}
			var v catalog.Version
			if err := cl.getJSON(cmd.Context(), r.versionPath(), &v); err != nil {
				return err
			}
			var rep quality.Report
			if err := cl.getJSON(cmd.Context(), r.at(v.Number).versionPath()+"/quality", &rep); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, &rep)
			}
			m := v.Manifest
			fmt.Fprintf(e.stdout, "%s@%d (%s): %d files from %d uploads, %d rows\n\n",
				m.Dataset, v.Number, v.State, len(m.Files), len(m.Uploads), m.Rows)
			return rep.Text(e.stdout, e.tty())
		},
	}
	c.Flags().BoolVar(&trend, "trend", false, "the quality of every upload, per site, with drift alerts")
	c.Flags().StringVar(&site, "site", "", "with --trend: one site only (* for all sites together)")
	return c
}

func newAlertsCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "alerts PROJECT/DATASET",
		Short: "List a dataset's drift alerts, newest first, with what each means",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var as []catalog.UploadAlert
			if printed, err := e.fetch(cmd, args[0], false, func(r ref) string { return r.path() + "/alerts" }, &as); printed || err != nil {
				return err
			}
			if len(as) == 0 {
				fmt.Fprintln(e.stdout, "no alerts")
				return nil
			}
			// The usual range is in each alert's sentence, below its row.
			t := &table{head: []string{"UPLOAD", "RECEIVED (UTC)", "SITE", "ALERT", "METRIC", "VALUE"}, right: map[int]bool{5: true}}
			for _, a := range as {
				received := a.ReceivedAt
				if at, err := time.Parse(time.RFC3339Nano, a.ReceivedAt); err == nil {
					received = minute(at)
				}
				site := a.Site
				if site == quality.AllSites {
					site = "(all)"
				}
				// A field's completeness is a share; scores are points of 100.
				metric, value := a.Metric, fmt.Sprintf("%.1f", a.Value)
				if f, ok := strings.CutPrefix(a.Metric, "completeness:"); ok {
					metric, value = f, fmt.Sprintf("%.0f%%", 100*a.Value)
				}
				t.add(a.Sentence, a.Upload.String(), received, site, a.Code, metric, value)
			}
			if err := t.write(e.stdout); err != nil {
				return err
			}
			return nil
		},
	}
}

// unknownSite explains an empty trend of one site: the site has no
// upload in the dataset; it names the sites that have.
func (e *env) unknownSite(cmd *cobra.Command, cl *client, r ref, site string) error {
	var all api.Trend
	if err := cl.getJSON(cmd.Context(), r.path()+"/quality/trend", &all); err != nil {
		return err
	}
	var known []string
	for _, p := range all.Points {
		if p.Site != quality.AllSites && !slices.Contains(known, p.Site) {
			known = append(known, p.Site)
		}
	}
	if len(known) == 0 {
		return &exitError{code: ExitRejected, err: fmt.Errorf("quality --trend: site %q is unknown: %s has no upload with a report yet", site, r)}
	}
	slices.Sort(known)
	return &exitError{code: ExitRejected, err: fmt.Errorf("quality --trend: site %q is unknown in %s; its sites are %s (or %s for all together)",
		site, r, strings.Join(known, ", "), quality.AllSites)}
}

func decodeBody(r io.Reader, v any) error {
	if err := json.NewDecoder(r).Decode(v); err != nil {
		return fmt.Errorf("reading the answer: %w", err)
	}
	return nil
}
