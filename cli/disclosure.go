package cli

import (
	"encoding/json"
	"fmt"
	"net/http"
	"net/url"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/catalog/disclosure"
)

func newDisclosureCmd(e *env) *cobra.Command {
	return &cobra.Command{
		Use:   "disclosure PROJECT/DATASET[@VERSION]",
		Short: "Show a version's disclosure report: k-anonymity, class sizes, l-diversity, re-identification risk",
		Long: `Disclosure shows how well the quasi-identifiers a dataset's profile declares hide each case among
others, for one version: its equivalence classes and their sizes, the cases in classes below the
project's k, the l-diversity of each sensitive attribute, the prosecutor re-identification risk
(1 over the size of a case's class) and the attributes that drive the smallest classes. A version
whose maximum risk is above the project's threshold stays a draft until a curator publishes it
with publish --override-reason.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var r disclosure.Report
			printed, err := e.fetch(cmd, args[0], true, func(r ref) string { return r.versionPath() + "/disclosure" }, &r)
			if err != nil || printed {
				return err
			}
			return printDisclosure(e, args[0], &r)
		},
	}
}

func printDisclosure(e *env, name string, r *disclosure.Report) error {
	w := e.stdout
	fmt.Fprintf(w, "%s: %d cases in %d classes over %s\n", name, r.Cases, r.Classes, list(r.Quasi))
	fmt.Fprintf(w, "k-anonymity: %d (the project's k is %d)\n", r.Anonymity, r.K)
	fmt.Fprintf(w, "below k: %d classes, %d cases (%.1f%%)\n", r.BelowK.Classes, r.BelowK.Cases, 100*r.BelowK.Share)
	verdict := "within the threshold"
	if r.AboveThreshold {
		verdict = "ABOVE the threshold: publishing needs publish --override-reason"
	}
	fmt.Fprintf(w, "prosecutor risk: max %.3f (%d cases), mean %.3f; threshold %.3f, %s\n", r.Risk.Max, r.Risk.CasesAtMax, r.Risk.Mean, r.MaxRisk, verdict)
	var sizes []string
	for i, s := range r.Sizes {
		if i == 12 {
			sizes = append(sizes, fmt.Sprintf("... (%d more sizes)", len(r.Sizes)-12))
			break
		}
		sizes = append(sizes, fmt.Sprintf("%d of size %d", s.Classes, s.Size))
	}
	fmt.Fprintf(w, "class sizes: %s\n", strings.Join(sizes, ", "))
	for _, d := range r.Diversity {
		name := d.Attribute
		if d.Level != "" {
			name += " (" + d.Level + " level)"
		}
		fmt.Fprintf(w, "l-diversity of %s: %d (%d classes share one value, %d cases)\n", name, d.L, d.Homogeneous, d.CasesInThem)
	}
	if d := r.Driver; d != nil {
		fmt.Fprintf(w, "smallest classes: %s alone already make a class of %d\n", list(d.Attributes), d.Smallest)
	}
	if r.Suppressed > 0 || r.Conflicts > 0 {
		fmt.Fprintf(w, "suppressed cases: %d; cases whose rows disagreed on an attribute: %d\n", r.Suppressed, r.Conflicts)
	}
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "ATTRIBUTES\tCLASSES\tSMALLEST\tCASES BELOW K")
	for _, c := range r.Combinations {
		fmt.Fprintf(tw, "%s\t%d\t%d\t%d\n", list(c.Attributes), c.Classes, c.Smallest, c.CasesBelowK)
	}
	return tw.Flush()
}

func list(s []string) string {
	if len(s) == 0 {
		return "(none)"
	}
	return strings.Join(s, ", ")
}

func newDisclosurePolicyCmd(e *env) *cobra.Command {
	var pol catalog.DisclosurePolicy
	c := &cobra.Command{
		Use:   "disclosure-policy PROJECT [--k N --max-risk R [--suppress]]",
		Short: "Show or set a project's disclosure control: k, risk threshold, suppression (curator)",
		Long: `Without flags, disclosure-policy shows the project's policy. With --k and --max-risk it sets them:
classes of fewer than k cases count as below k; a version whose maximum prosecutor risk is above
--max-risk cannot be published without a recorded override; with --suppress, the quasi-identifiers
of cases in classes below k are suppressed when a version is made (counted in its lineage).`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			cl, err := e.client()
			if err != nil {
				return err
			}
			path := "/projects/" + url.PathEscape(args[0]) + "/disclosure"
			var out catalog.DisclosurePolicy
			set := cmd.Flags().Changed("k") || cmd.Flags().Changed("max-risk") || cmd.Flags().Changed("suppress")
			if set {
				if !cmd.Flags().Changed("k") || !cmd.Flags().Changed("max-risk") {
					return usageErr("disclosure-policy: give both --k and --max-risk")
				}
				err = cl.putJSON(cmd, path, pol, &out)
			} else {
				err = cl.getJSON(cmd.Context(), path, &out)
			}
			if err != nil {
				return err
			}
			if e.json {
				return writeJSON(e.stdout, out)
			}
			fmt.Fprintf(e.stdout, "%s: k %d, max risk %.3f, suppression %s\n", args[0], out.K, out.MaxRisk, map[bool]string{true: "on", false: "off"}[out.Suppress])
			return nil
		},
	}
	c.Flags().IntVar(&pol.K, "k", 0, "the project's k (2 to 1000)")
	c.Flags().Float64Var(&pol.MaxRisk, "max-risk", 0, "the highest maximum prosecutor risk publishable without an override (above 0, at most 1)")
	c.Flags().BoolVar(&pol.Suppress, "suppress", false, "suppress the quasi-identifiers of cases in classes below k when versions are made")
	return c
}

// putJSON puts in and decodes the answer into out.
func (c *client) putJSON(cmd *cobra.Command, path string, in, out any) error {
	b, err := json.Marshal(in)
	if err != nil {
		return err
	}
	resp, err := c.do(cmd.Context(), http.MethodPut, path, nil, strings.NewReader(string(b)), nil)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	return json.NewDecoder(resp.Body).Decode(out)
}
