package cli

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
)

func newValidateCmd(e *env) *cobra.Command {
	var profile, zone string
	var rejectAbove float64
	c := &cobra.Command{
		Use:   "validate FILE [--profile FILE]",
		Short: "Check an export file offline and print its quality report",
		Long: `Validate reads FILE (CSV, TSV or JSON Lines, maybe gzip) through a mapping profile (or,
without one, expects the schema's own column names), exactly as the server's ingest would, and
prints the quality report: it runs the server's own ingest into a throwaway catalog under a
throwaway key, removed before it exits, so its verdict is the server's. Nothing is kept or sent.
Exit 0: the server would accept it; 1: it would be rejected (unreadable, no valid rows, or more
invalid rows than --reject-above), with the reason.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if !(rejectAbove >= 0 && rejectAbove <= 1) {
				return usageErr("--reject-above %v: want a share between 0 and 1", rejectAbove)
			}
			spec := catalog.DatasetSpec{Timezone: zone, RejectAbove: &rejectAbove}
			if profile != "" {
				b, err := os.ReadFile(profile)
				if err != nil {
					return usageErr("profile: %v", err)
				}
				if _, err := schema.ParseProfile(b); err != nil {
					return usageErr("%s: %v", profile, err)
				}
				spec.Profile = b
			}
			f, err := os.Open(args[0])
			if err != nil {
				return usageErr("validate: %v", err)
			}
			defer f.Close()
			name := filepath.Base(args[0])
			res, err := catalog.Check(cmd.Context(), f, catalog.CheckOptions{Name: name, Dataset: spec})
			if errors.Is(err, catalog.ErrFileInvalid) {
				fe, _ := schema.AsFileError(err)
				if e.json {
					writeJSON(e.stdout, map[string]any{"accepted": false, "file": name, "error": map[string]any{
						"rule": fe.Rule, "line": fe.Line, "column": fe.Column, "message": fe.Msg}})
					return errSilent
				}
				return fmt.Errorf("%s: %s", name, fe.Error())
			}
			if errors.Is(err, catalog.ErrInvalid) {
				return usageErr("%v", err)
			}
			if err != nil {
				return err
			}
			rep, ok := res.Report, res.Accepted
			if e.json {
				writeJSON(e.stdout, map[string]any{"accepted": ok, "reason": res.Reason, "file": name, "report": rep, "unmapped_columns": res.Unmapped, "events": res.Events})
			} else {
				rep.Text(e.stdout, e.tty())
				verdict := "would be accepted"
				if !ok {
					verdict = "would be REJECTED: " + res.Reason
				}
				if ev := res.Events; ev != nil && ev.Copies > 0 {
					fmt.Fprintf(e.stdout, "\n%d rows are exact copies of an earlier row of the file: they would be stored once\n", ev.Copies)
				}
				fmt.Fprintf(e.stdout, "\n%s: %s\n", name, verdict)
			}
			if !ok {
				return errSilent
			}
			return nil
		},
	}
	c.Flags().StringVar(&profile, "profile", "", "mapping profile (YAML)")
	c.Flags().StringVar(&zone, "timezone", "", "IANA zone for wall-clock times (overrides the profile's)")
	c.Flags().Float64Var(&rejectAbove, "reject-above", catalog.DefaultRejectAbove, "the threshold of invalid rows to judge by (0-1)")
	return c
}
