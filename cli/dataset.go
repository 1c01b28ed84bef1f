package cli

import (
	"fmt"
	"os"
	"strconv"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server/api"
)

func newDatasetCmd(e *env) *cobra.Command {
	c := &cobra.Command{Use: "dataset", Short: "Create, list, edit, archive and delete datasets"}
	var profile, zone, title, from, to, changes string
	var rejectAbove float64
	var drafts, historical bool
	create := &cobra.Command{
		Use:   "create PROJECT/DATASET [--profile FILE] [--timezone ZONE]",
		Short: "Create a dataset with its mapping profile (curator)",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], false)
			if err != nil {
				return err
			}
			req := api.CreateDataset{Name: r.Dataset, Title: title, Timezone: zone, Drafts: drafts, Changes: changes, Historical: historical}
			if profile != "" {
				b, err := os.ReadFile(profile)
				if err != nil {
					return usageErr("profile: %v", err)
				}
				req.Profile = string(b)
			}
			if cmd.Flags().Changed("reject-above") {
				req.RejectAbove = &rejectAbove
			}
			// The dataset's zone, for a window given as dates: --timezone,
			// else the profile's, else UTC (as the server decides it).
			zoneOf := func() (string, error) {
				if zone != "" || profile == "" {
					return zone, nil
				}
				p, err := schema.ParseProfile([]byte(req.Profile))
				if err != nil {
					return "", err
				}
				return p.Timezone, nil
			}
			for _, wf := range []struct {
				flag, v string
				dst     **time.Time
			}{{"window-from", from, &req.WindowFrom}, {"window-to", to, &req.WindowTo}} {
				if wf.v == "" {
					continue
				}
				t, err := windowInstant(wf.flag, wf.v, zoneOf, e.stderr)
				if err != nil {
					return err
				}
				*wf.dst = &t
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			var d catalog.Dataset
			if err := cl.postJSON(cmd.Context(), "/projects/"+r.Project+"/datasets", req, &d); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, d)
			}
			fmt.Fprintf(e.stdout, "created dataset %s (zone %s, rejects uploads with more than %.1f%% invalid rows", d.Ref(), d.Timezone, 100*d.RejectAbove)
			if d.Drafts {
				fmt.Fprint(e.stdout, "; new versions are drafts until published")
			}
			if d.Changes == catalog.ChangesCorrect {
				fmt.Fprint(e.stdout, "; a changed event under a stable event_id is taken as a correction")
			}
			fmt.Fprintln(e.stdout, ")")
			return nil
		},
	}
	f := create.Flags()
	f.StringVar(&profile, "profile", "", "mapping profile (YAML); without it the file's header must use the schema's field names")
	f.StringVar(&zone, "timezone", "", "IANA zone for wall-clock times without offset (overrides the profile's)")
	f.StringVar(&title, "title", "", "human-readable title")
	f.Float64Var(&rejectAbove, "reject-above", catalog.DefaultRejectAbove, "reject an upload whose share of invalid rows is above this (0-1)")
	f.BoolVar(&historical, "historical", false, "the data are past events, not a live feed: currentness is not scored")
	f.BoolVar(&drafts, "drafts", false, "new versions start as drafts, seen by curators only until published (flowcat publish)")
	f.StringVar(&changes, "changes", "", "with a stable event_id: refuse (default) an upload that changes a held event, or correct (take it as a correction)")
	f.StringVar(&from, "window-from", "", "declared start of the data (RFC 3339, or a date: its start in the dataset's zone); earlier events are flagged")
	f.StringVar(&to, "window-to", "", "declared end of the data (RFC 3339, or a date: its start in the dataset's zone); later events are flagged")

	list := &cobra.Command{
		Use:   "list PROJECT",
		Short: "List a project's datasets",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cl, err := e.client()
			if err != nil {
				return err
			}
			var ds []catalog.Dataset
			if err := cl.getJSON(cmd.Context(), "/projects/"+args[0]+"/datasets", &ds); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, ds)
			}
			// The title goes on a line of its own under its dataset, so
			// that the list fits 80 columns however long titles are.
			tb := table{head: []string{"DATASET", "ZONE", "LATEST", "UPLOADS"}, right: map[int]bool{2: true, 3: true}}
			for _, d := range ds {
				tb.add(d.Title, d.Ref().String(), d.Timezone, strconv.Itoa(d.Latest), strconv.Itoa(d.Uploads))
			}
			return tb.write(e.stdout)
		},
	}
	changesCmd := &cobra.Command{
		Use:   "changes PROJECT/DATASET refuse|correct",
		Short: "Set what an upload that changes a held event (stable event_id) does (curator)",
		Long: `With a profile that declares event_id stable, an upload that re-sends a held event with
other content is refused, naming its lines and fields (refuse, the default), or taken as a
correction that replaces the old event in the new version (correct).`,
		Args: cobra.ExactArgs(2),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], false)
			if err != nil {
				return err
			}
			if _, err := catalog.ParseChangePolicy(args[1]); err != nil || args[1] == "" {
				return usageErr("dataset changes: %q: want refuse or correct", args[1])
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			var d catalog.Dataset
			if err := cl.postJSON(cmd.Context(), r.path()+"/changes", api.SetChanges{Changes: args[1]}, &d); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, d)
			}
			fmt.Fprintf(e.stdout, "%s: changed events are now %s\n", d.Ref(), map[catalog.ChangePolicy]string{
				catalog.ChangesRefuse: "refused", catalog.ChangesCorrect: "taken as corrections"}[d.Changes])
			return nil
		},
	}
	c.AddCommand(create, list, changesCmd, newMetadataCmd(e))
	c.AddCommand(newDatasetChangeCmds(e)...)
	return c
}
