package cli

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"os"
	"os/signal"
	"runtime/debug"
	"syscall"
	"time"

	"github.com/spf13/cobra"

	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server"
)

func newServeCmd(e *env) *cobra.Command {
	var dir, addr, masterFile string
	var maxUpload, memLimit int64
	var maxUploads int
	var bodyIdle time.Duration
	var author, logLevel string
	var lim schema.Limits
	c := &cobra.Command{
		Use:   "serve --data DIR --addr HOST:PORT",
		Short: "Run the catalog server on a data directory",
		Args:  cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			if dir == "" {
				return usageErr("serve: --data DIR is required")
			}
			var level slog.Level
			if err := level.UnmarshalText([]byte(logLevel)); err != nil {
				return usageErr("serve: --log-level %q: want debug, info, warn or error", logLevel)
			}
			log := slog.New(slog.NewJSONHandler(e.stderr, &slog.HandlerOptions{Level: level}))
			version, goVersion := server.BuildVersion()
			log.Info("starting", "version", version, "go", goVersion)
			if memLimit > 0 && os.Getenv("GOMEMLIMIT") == "" {
				// A soft limit: the collector runs harder near it, so the
				// heap's garbage does not double the resident memory.
				debug.SetMemoryLimit(memLimit)
			}
			d := dataDir(dir)
			ctx, stop := signal.NotifyContext(cmd.Context(), syscall.SIGINT, syscall.SIGTERM)
			defer stop()
			run, err := startServer(ctx, d, addr, masterFile, serverOptions{maxUpload: maxUpload, maxUploads: maxUploads, bodyIdle: bodyIdle, citationAuthor: author, limits: lim}, log)
			if err != nil {
				return err
			}
			log.Info("serving", "url", run.url, "data", dir, "master_key", run.masterFrom)
			return run.wait(ctx)
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory (made by flowcat init)")
	c.Flags().StringVar(&addr, "addr", "127.0.0.1:8470", "listen address HOST:PORT")
	c.Flags().StringVar(&masterFile, "master-key", "", "master key file (else FLOWCAT_MASTER_KEY, FLOWCAT_MASTER_KEY_FILE, or DIR/master.key)")
	c.Flags().Int64Var(&maxUpload, "max-upload-bytes", 8<<30, "largest upload body accepted, in bytes as sent (gzip counts compressed; 413 above)")
	c.Flags().IntVar(&maxUploads, "max-uploads-per-token", server.DefaultMaxUploadsPerToken, "uploads one token may have in progress at once (429 above)")
	c.Flags().DurationVar(&bodyIdle, "body-idle-timeout", server.DefaultBodyIdleTimeout, "longest wait for the next byte of a request body (408 after)")
	c.Flags().IntVar(&lim.MaxLineBytes, "max-line-bytes", schema.DefaultMaxLineBytes, "longest line of an uploaded file (CSV/TSV physical line, JSON Lines line)")
	c.Flags().IntVar(&lim.MaxColumns, "max-columns", schema.DefaultMaxColumns, "most columns in an uploaded CSV/TSV header")
	c.Flags().Int64Var(&lim.MaxBytes, "max-decompressed-bytes", schema.DefaultMaxBytes, "largest uploaded file after gzip decompression")
	c.Flags().Int64Var(&lim.MaxRows, "max-rows", schema.DefaultMaxRows, "most data rows in one uploaded file")
	c.Flags().StringVar(&author, "citation-author", "", "author named in CITATION.cff files, e.g. the lab (default: the project's title)")
	c.Flags().StringVar(&logLevel, "log-level", "info", "least severe log records written: debug, info, warn or error (each request is logged at info)")
	c.Flags().Int64Var(&memLimit, "memory-limit", DefaultMemoryLimit, "soft limit of the server's memory in bytes (Go's runtime/debug.SetMemoryLimit; 0: none; the GOMEMLIMIT environment variable wins)")
	return c
}

// DefaultMemoryLimit is serve's soft memory limit: what an upload holds
// (two sorts' buffers, Parquet row groups, the case in hand) fits well
// under it, and the collector keeps garbage from pushing the resident
// memory past it.
const DefaultMemoryLimit = 200 << 20

// serverOptions are serve's tuning flags.
type serverOptions struct {
	maxUpload      int64
	maxUploads     int
	bodyIdle       time.Duration
	citationAuthor string
	limits         schema.Limits // of uploaded files
}

// running is a started server.
type running struct {
	url        string
	masterFrom string
	auth       *server.Authority
	hs         *http.Server
	done       chan error
	close      func() error
}

func startServer(ctx context.Context, d dataDir, addr, masterFile string, so serverOptions, log *slog.Logger) (*running, error) {
	if _, err := d.readInstance(); err != nil {
		return nil, err
	}
	master, from, err := d.findMasterKey(masterFile)
	if err != nil {
		return nil, fmt.Errorf("serve: %w", err)
	}
	auth, err := d.authority()
	if err != nil {
		return nil, fmt.Errorf("serve: %w", err)
	}
	st, err := d.openStore(master, log, so.limits)
	if err != nil {
		return nil, fmt.Errorf("serve: %w", err)
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		st.Close()
		return nil, fmt.Errorf("serve: %w", err)
	}
	srv := server.New(server.Config{Store: st, Authority: auth, Logger: log, MaxUploadBytes: so.maxUpload, MaxUploadsPerToken: so.maxUploads, BodyIdleTimeout: so.bodyIdle, CitationAuthor: so.citationAuthor})
	hs := srv.HTTPServer(addr)
	r := &running{url: "http://" + ln.Addr().String(), masterFrom: from, auth: auth, hs: hs, done: make(chan error, 1), close: st.Close}
	go func() { r.done <- hs.Serve(ln) }()
	return r, nil
}

// wait serves until ctx ends, then shuts down gracefully.
func (r *running) wait(ctx context.Context) error {
	select {
	case err := <-r.done:
		r.close()
		return fmt.Errorf("serve: %w", err)
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	err := r.hs.Shutdown(sctx)
	if serr := <-r.done; serr != nil && !errors.Is(serr, http.ErrServerClosed) && err == nil {
		err = serr
	}
	if cerr := r.close(); err == nil {
		err = cerr
	}
	return err
}
