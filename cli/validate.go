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
prints the quality report. Nothing is stored or sent. Exit 0: the server would accept it;
1: it would be rejected (unreadable, or more invalid rows than --reject-above).`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if !(rejectAbove >= 0 && rejectAbove <= 1) {
				return usageErr("--reject-above %v: want a share between 0 and 1", rejectAbove)
			}
			prof := schema.DefaultProfile()
			if profile != "" {
				b, err := os.ReadFile(profile)
				if err != nil {
					return usageErr("profile: %v", err)
				}
				prof, err = schema.ParseProfile(b)
				if err != nil {
					return usageErr("%s: %v", profile, err)
				}
			}
			if zone != "" {
				if err := prof.SetTimezone(zone); err != nil {
					return usageErr("--timezone: %v", err)
				}
			}
			f, err := os.Open(args[0])
			if err != nil {
				return usageErr("validate: %v", err)
			}
			defer f.Close()
			name := filepath.Base(args[0])
			res, err := catalog.Check(cmd.Context(), f, prof, catalog.CheckOptions{Name: name})
			if errors.Is(err, catalog.ErrFileInvalid) {
				fe, _ := schema.AsFileError(err)
				if e.json {
					writeJSON(e.stdout, map[string]any{"accepted": false, "file": name, "error": map[string]any{
						"rule": fe.Rule, "line": fe.Line, "column": fe.Column, "message": fe.Msg}})
					return errSilent
				}
				return fmt.Errorf("%s: %s", name, fe.Error())
			}
			if err != nil {
				return err
			}
			rep := res.Report
			ok := rep.Rows.Accepted > 0 && rep.RejectedShare() <= rejectAbove
			if e.json {
				writeJSON(e.stdout, map[string]any{"accepted": ok, "file": name, "report": rep, "unmapped_columns": res.Unmapped, "events": res.Events})
			} else {
				rep.Text(e.stdout, e.tty())
				verdict := "would be accepted"
				if !ok {
					verdict = fmt.Sprintf("would be REJECTED: %.2f%% invalid rows (threshold %.2f%%)", 100*rep.RejectedShare(), 100*rejectAbove)
					if rep.Rows.Accepted == 0 {
						verdict = "would be REJECTED: no valid rows"
					}
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
