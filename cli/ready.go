package cli

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"time"

	"github.com/spf13/cobra"
)

// newReadyCmd is the container's health check: the image has no HTTP
// client of its own, so the binary asks its server.
func newReadyCmd(e *env) *cobra.Command {
	var url string
	var timeout time.Duration
	c := &cobra.Command{
		Use:   "ready [--url URL]",
		Short: "Exit 0 when a server's /readyz answers 200 (its catalog and blob store are reachable), else 1",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			ctx, cancel := context.WithTimeout(cmd.Context(), timeout)
			defer cancel()
			req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
			if err != nil {
				return usageErr("ready: --url %q: %v", url, err)
			}
			res, err := http.DefaultClient.Do(req)
			if err != nil {
				return fmt.Errorf("ready: %w", err)
			}
			defer res.Body.Close()
			body, _ := io.ReadAll(io.LimitReader(res.Body, 4096))
			if res.StatusCode != http.StatusOK {
				return fmt.Errorf("ready: %s answered %d: %s", url, res.StatusCode, body)
			}
			if !e.quiet {
				fmt.Fprintf(e.stdout, "ready: %s\n", url)
			}
			return nil
		},
	}
	c.Flags().StringVar(&url, "url", "http://127.0.0.1:8470/readyz", "the server's readiness URL")
	c.Flags().DurationVar(&timeout, "timeout", 5*time.Second, "how long to wait for the answer")
	return c
}
