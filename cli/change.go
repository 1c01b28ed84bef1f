package cli

import (
	"context"
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/server/api"
)

// patchJSON sends in with PATCH and decodes the answer into out.
func (c *client) patchJSON(ctx context.Context, path string, in, out any) error {
	b, err := json.Marshal(in)
	if err != nil {
		return err
	}
	resp, err := c.do(ctx, http.MethodPatch, path, nil, strings.NewReader(string(b)), nil)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	return json.NewDecoder(resp.Body).Decode(out)
}

// newDatasetChangeCmds are dataset edit, profiles, archive, unarchive and
// delete.
func newDatasetChangeCmds(e *env) []*cobra.Command {
	var title, description, profile, zone, from, to string
	var rejectAbove float64
	var clearWindow bool
	edit := &cobra.Command{
		Use:   "edit PROJECT/DATASET [--title T] [--description D] [--reject-above X] [--window-from T --window-to T | --clear-window] [--profile FILE] [--timezone ZONE]",
		Short: "Change a dataset (curator); a new profile makes a new profile revision for later uploads",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			r, err := parseRef(args[0], false)
			if err != nil {
				return err
			}
			fl := cmd.Flags()
			req := map[string]any{}
			for flag, key := range map[string]string{"title": "title", "description": "description", "timezone": "timezone"} {
				if fl.Changed(flag) {
					v, _ := fl.GetString(flag)
					req[key] = v
				}
			}
			if fl.Changed("reject-above") {
				req["reject_above"] = rejectAbove
			}
			if clearWindow {
				req["clear_window"] = true
			}
			// A window given as dates is in the dataset's zone: the new
			// --timezone, else the one it has.
			zoneOf := func() (string, error) {
				if fl.Changed("timezone") {
					return fl.GetString("timezone")
				}
				cl, err := e.client()
				if err != nil {
					return "", err
				}
				var d catalog.Dataset
				if err := cl.getJSON(cmd.Context(), r.path(), &d); err != nil {
					return "", err
				}
				return d.Timezone, nil
			}
			for _, name := range []string{"window-from", "window-to"} {
				v := map[string]string{"window-from": from, "window-to": to}[name]
				if v == "" {
					continue
				}
				t, err := windowInstant(name, v, zoneOf, e.stderr)
				if err != nil {
					return err
				}
				req[strings.ReplaceAll(name, "-", "_")] = t
			}
			if fl.Changed("profile") {
				b, err := os.ReadFile(profile)
				if err != nil {
					return usageErr("profile: %v", err)
				}
				req["profile"] = string(b)
			}
			if len(req) == 0 {
				return usageErr("dataset edit: nothing to change: give --title, --description, --reject-above, a window, --profile or --timezone")
			}
			cl, err := e.client()
			if err != nil {
				return err
			}
			var d catalog.Dataset
			if err := cl.patchJSON(cmd.Context(), r.path(), req, &d); err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, d)
			}
			fmt.Fprintf(e.stdout, "%s: profile revision %d, zone %s, rejects above %.1f%% invalid rows\n", d.Ref(), d.Revision(), d.Timezone, 100*d.RejectAbove)
			return nil
		},
	}
	f := edit.Flags()
	f.StringVar(&title, "title", "", "new title")
	f.StringVar(&description, "description", "", "new description")
	f.Float64Var(&rejectAbove, "reject-above", catalog.DefaultRejectAbove, "new threshold of invalid rows (0-1)")
	f.StringVar(&from, "window-from", "", "new declared start of the data (RFC 3339, or a date: its start in the dataset's zone)")
	f.StringVar(&to, "window-to", "", "new declared end of the data (RFC 3339, or a date: its start in the dataset's zone)")
	f.BoolVar(&clearWindow, "clear-window", false, "remove the declared window")
	f.StringVar(&profile, "profile", "", "new mapping profile (YAML file; an empty file for the default profile)")
	f.StringVar(&zone, "timezone", "", "new IANA zone for wall-clock times")

	profiles := &cobra.Command{
		Use:   "profiles PROJECT/DATASET",
		Short: "List a dataset's profile revisions",
		Args:  cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var out api.ProfileRevisions
			if printed, err := e.fetch(cmd, args[0], false, func(r ref) string { return r.path() + "/profiles" }, &out); printed || err != nil {
				return err
			}
			fmt.Fprintln(e.stdout, "REVISION\tAT\tBY\tZONE\tHASH")
			for _, r := range out.Revisions {
				fmt.Fprintf(e.stdout, "%d\t%s\t%s\t%s\t%s\n", r.Revision, stamp(r.At), orDash(r.By), r.Timezone, r.ProfileHash)
			}
			return nil
		},
	}

	mark := func(use, short, action string, reasonRequired bool) *cobra.Command {
		var reason string
		c := &cobra.Command{
			Use:   use,
			Short: short,
			Args:  cobra.ExactArgs(1),
			RunE: func(cmd *cobra.Command, args []string) error {
				r, err := parseRef(args[0], false)
				if err != nil {
					return err
				}
				if reasonRequired && reason == "" {
					return usageErr("dataset %s: --reason is required", action)
				}
				cl, err := e.client()
				if err != nil {
					return err
				}
				var body any
				if action != "unarchive" {
					body = api.Reason{Reason: reason}
				}
				var out json.RawMessage
				if err := cl.postJSON(cmd.Context(), r.path()+"/"+action, body, &out); err != nil {
					return err
				}
				if e.json {
					_, err := e.stdout.Write(append(out, '\n'))
					return err
				}
				fmt.Fprintf(e.stdout, "%s: %sd\n", r, strings.TrimSuffix(action, "e"))
				return nil
			},
		}
		if action != "unarchive" {
			c.Flags().StringVar(&reason, "reason", "", "why (kept in the record and the audit trail)")
		}
		return c
	}
	return []*cobra.Command{
		edit, profiles,
		mark("archive PROJECT/DATASET [--reason TEXT]", "Make a dataset read-only and hide it from lists; its versions stay pullable (curator)", "archive", false),
		mark("unarchive PROJECT/DATASET", "Make an archived dataset writable again (curator)", "unarchive", false),
		mark("delete PROJECT/DATASET --reason TEXT", "Delete a dataset: its versions are retracted, their files go at the next gc (curator; admin if a version was published)", "delete", true),
	}
}

// newProjectChangeCmds are project archive, unarchive and delete.
func newProjectChangeCmds(e *env) []*cobra.Command {
	mark := func(use, short, action string, reasonRequired bool) *cobra.Command {
		var reason string
		c := &cobra.Command{
			Use:   use,
			Short: short,
			Args:  cobra.ExactArgs(1),
			RunE: func(cmd *cobra.Command, args []string) error {
				if err := catalog.ValidName("project", args[0]); err != nil {
					return usageErr("%v", err)
				}
				if reasonRequired && reason == "" {
					return usageErr("project %s: --reason is required", action)
				}
				cl, err := e.client()
				if err != nil {
					return err
				}
				var body any
				if action != "unarchive" {
					body = api.Reason{Reason: reason}
				}
				var out json.RawMessage
				if err := cl.postJSON(cmd.Context(), "/projects/"+args[0]+"/"+action, body, &out); err != nil {
					return err
				}
				if e.json {
					_, err := e.stdout.Write(append(out, '\n'))
					return err
				}
				fmt.Fprintf(e.stdout, "%s: %sd\n", args[0], strings.TrimSuffix(action, "e"))
				return nil
			},
		}
		if action != "unarchive" {
			c.Flags().StringVar(&reason, "reason", "", "why (kept in the record and the audit trail)")
		}
		return c
	}
	return []*cobra.Command{
		mark("archive PROJECT [--reason TEXT]", "Make a project read-only and hide it from lists (admin)", "archive", false),
		mark("unarchive PROJECT", "Make an archived project writable again (admin)", "unarchive", false),
		mark("delete PROJECT --reason TEXT", "Delete a project and its datasets (admin)", "delete", true),
	}
}
