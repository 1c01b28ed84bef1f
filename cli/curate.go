package cli

import (
	"fmt"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// stateRef parses P/D@N for publish and retract, which name a version by
// its number only.
func stateRef(arg, verb string) (ref, error) {
	r, err := parseRef(arg, true)
	if err != nil {
		return r, err
	}
	if sel, err := catalog.ParseSelector(r.Selector); err != nil || sel.Kind != catalog.SelectNumber {
		return r, usageErr("%s: want PROJECT/DATASET@N with the version's number, not %q", verb, arg)
	}
	return r, nil
}

func newPublishCmd(e *env) *cobra.Command {
	var override string
	c := &cobra.Command{
		Use:   "publish PROJECT/DATASET@N [--override-reason TEXT]",
		Short: "Publish a draft version, so that the project's members see it",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := stateRef(args[0], "publish")
			if err != nil {
				return err
			}
			if cmd.Flags().Changed("override-reason") {
				return e.changeState(cmd, r, "publish-override", api.Reason{Reason: override})
			}
			return e.changeState(cmd, r, "publish", nil)
		},
	}
	c.Flags().StringVar(&override, "override-reason", "", "publish although the version's disclosure risk is above the project's threshold, recording why (see disclosure)")
	return c
}

func newRetractCmd(e *env) *cobra.Command {
	var reason string
	c := &cobra.Command{
		Use:   "retract PROJECT/DATASET@N --reason TEXT",
		Short: "Retract a version: its data is no longer served, its citation is",
		Long: `Retract withdraws a version for good: downloads answer 410 Gone with the reason, while its
manifest, quality report and citation stay readable for audit. Later versions are not changed:
to remove the data itself from the dataset, upload a replacement (upload --mode).`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := stateRef(args[0], "retract")
			if err != nil {
				return err
			}
			if reason == "" {
				return usageErr("retract: --reason is required")
			}
			return e.changeState(cmd, r, "retract", api.Reason{Reason: reason})
		},
	}
	c.Flags().StringVar(&reason, "reason", "", "why the version is withdrawn (shown with every refused download)")
	return c
}

func (e *env) changeState(cmd *cobra.Command, r ref, action string, body any) error {
	cl, err := e.client()
	if err != nil {
		return err
	}
	if body == nil {
		body = struct{}{}
	}
	var v catalog.Version
	if err := cl.postJSON(cmd.Context(), r.versionPath()+"/"+action, body, &v); err != nil {
		return err
	}
	if e.json {
		return writeJSON(e.stdout, v)
	}
	fmt.Fprintf(e.stdout, "%s@%d is %s (snapshot %s)\n", r.Project+"/"+r.Dataset, v.Number, v.State, v.SnapshotID)
	return nil
}

func newGCCmd(e *env) *cobra.Command {
	var dry bool
	var grace time.Duration
	c := &cobra.Command{
		Use:     "sweep",
		Aliases: []string{"gc"}, // the name of releases up to 8a7be85
		Short:   "Delete stored files no version references (admin)",
		Long: `Sweep asks the server to delete the Parquet files that no version of any dataset lists: what a
crash between storing a file and committing its version leaves behind. Files of uploads in progress
and files younger than --grace are kept; every version, retracted ones too, keeps its files.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			cl, err := e.client()
			if err != nil {
				return err
			}
			req := api.GC{DryRun: dry}
			if cmd.Flags().Changed("grace") {
				if grace < 0 {
					return usageErr("sweep: --grace must not be negative")
				}
				g := grace.Seconds()
				req.GraceSeconds = &g
			}
			var res catalog.GCResult
			if err := cl.postJSON(cmd.Context(), "/admin/gc", req, &res); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, res)
			}
			verb := "deleted"
			if res.DryRun {
				verb = "would delete"
			}
			fmt.Fprintf(e.stdout, "%d files stored, %d referenced, %d held by uploads in progress, %d within the grace period; %s %d (%d bytes)\n",
				res.Blobs, res.Referenced, res.Pending, res.Young, verb, len(res.Deleted), res.DeletedBytes)
			for _, id := range res.Deleted {
				fmt.Fprintf(e.stdout, "  %s\n", id)
			}
			return nil
		},
	}
	c.Flags().BoolVar(&dry, "dry-run", false, "list what would be deleted, delete nothing")
	c.Flags().DurationVar(&grace, "grace", catalog.DefaultGCGrace, "keep unreferenced files younger than this")
	return c
}

// versionsTable prints versions with their state and lineage, in 80
// columns: the mode and changed events only when some version has them
// (most datasets only append), the snapshot id to 12 hex digits (a
// selector needs 8 or more).
func versionsTable(e *env, vs []catalog.Version) error {
	var modes, changes bool
	for _, v := range vs {
		modes = modes || v.Mode != "" && v.Mode != catalog.ModeAppend
		changes = changes || v.Events != nil && v.Events.Changed > 0
	}
	t := &table{head: []string{"VERSION", "STATE", "CREATED (UTC)", "ROWS", "NEW", "HELD"}, right: map[int]bool{0: true, 3: true, 4: true, 5: true}}
	if changes {
		t.head = append(t.head, "CHANGED")
		t.right[len(t.head)-1] = true
	}
	if modes {
		t.head = append(t.head, "MODE")
	}
	t.head = append(t.head, "SCORE", "SNAPSHOT")
	t.right[len(t.head)-2] = true
	for _, v := range vs {
		// The lineage's event counts: new, already held, changed (versions
		// made before events were counted show "-").
		nw, held, changed := "-", "-", "-"
		if ev := v.Events; ev != nil {
			nw, held, changed = fmt.Sprint(ev.New), fmt.Sprint(ev.Held), fmt.Sprint(ev.Changed)
		}
		row := []string{fmt.Sprint(v.Number), string(v.State), minute(v.CreatedAt), fmt.Sprint(v.Rows), nw, held}
		if changes {
			row = append(row, changed)
		}
		if modes {
			mode := string(v.Mode)
			if mode == "" {
				mode = "-"
			}
			row = append(row, mode)
		}
		row = append(row, score(v.Quality.Score), v.SnapshotID.String()[:12])
		t.add("", row...)
	}
	return t.write(e.stdout)
}
