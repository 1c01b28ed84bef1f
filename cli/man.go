package cli

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"
	"github.com/spf13/cobra/doc"
)

// newManCmd writes the manual pages, generated from the commands
// themselves (their usage, descriptions and flags), so that they never
// disagree with --help.
func newManCmd(e *env) *cobra.Command {
	var dir string
	c := &cobra.Command{
		Use:   "man -o DIR",
		Short: "Write the manual pages (section 1), one per command, into DIR",
		Long: `Man writes a troff manual page per command, flowcat.1 and flowcat-COMMAND.1 for each command
and subcommand, generated from the same text as --help. Read one with man DIR/flowcat-demo.1, or
install them where man looks, such as /usr/local/share/man/man1 (MANPATH).`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if dir == "" {
				return usageErr("man: -o DIR is required")
			}
			if err := os.MkdirAll(dir, 0o755); err != nil {
				return usageErr("man: %v", err)
			}
			root := cmd.Root()
			root.DisableAutoGenTag = true // no generation date: the same commands give the same pages
			hdr := &doc.GenManHeader{Title: "FLOWCAT", Section: "1", Source: "flowcat", Manual: "flowcat manual"}
			if err := doc.GenManTree(root, hdr, dir); err != nil {
				return fmt.Errorf("man: %w", err)
			}
			if !e.quiet {
				fmt.Fprintf(e.stderr, "wrote the manual pages into %s\n", dir)
			}
			return nil
		},
	}
	c.Flags().StringVarP(&dir, "output", "o", "", "directory to write the pages into")
	return c
}
