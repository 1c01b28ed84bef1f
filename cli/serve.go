package cli

import (
	"context"
	"crypto/tls"
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

	"github.com/flowcat-catalog/flowcat/catalog"
	"github.com/flowcat-catalog/flowcat/schema"
	"github.com/flowcat-catalog/flowcat/server"
)

func newServeCmd(e *env) *cobra.Command {
	var dir, addr, masterFile, blobs string
	var maxUpload, memLimit, changeWindow int64
	var maxUploads int
	var bodyIdle time.Duration
	var author, tlsCert, tlsKey, logLevel string
	var lim schema.Limits
	var rateLimit float64
	var rateBurst int
	c := &cobra.Command{
		Use:   "serve --data DIR --addr HOST:PORT [--blobs s3://BUCKET/PREFIX]",
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
			lines := newLineBuffer(e.stderr)
			defer lines.Flush()
			log := slog.New(warnFlusher{slog.NewJSONHandler(lines, &slog.HandlerOptions{Level: level}), lines})
			version, goVersion := server.BuildVersion()
			log.Info("starting", "version", version, "go", goVersion)
			if memLimit > 0 && os.Getenv("GOMEMLIMIT") == "" {
				// A soft limit: the collector runs harder near it, so the
				// heap's garbage does not double the resident memory.
				debug.SetMemoryLimit(memLimit)
			}
			d := dataDir(dir)
			where, err := d.blobsSpec(blobs)
			if err != nil {
				return err
			}
			if where == "" {
				where = d.blobs()
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), syscall.SIGINT, syscall.SIGTERM)
			defer stop()
			if (tlsCert == "") != (tlsKey == "") {
				return usageErr("serve: --tls-cert and --tls-key go together")
			}
			run, err := startServer(ctx, d, addr, masterFile, serverOptions{maxUpload: maxUpload, maxUploads: maxUploads, bodyIdle: bodyIdle, citationAuthor: author, limits: lim,
				rateLimit: rateLimit, rateBurst: rateBurst, tlsCert: tlsCert, tlsKey: tlsKey, changeWindow: changeWindow}, log)
			if err != nil {
				return err
			}
			log.Info("serving", "url", run.url, "data", dir, "blobs", where, "master_key", run.masterFrom)
			lines.Flush() // the address, for whoever waits on it
			return run.wait(ctx)
		},
	}
	c.Flags().StringVar(&dir, "data", "", "data directory (made by flowcat init)")
	c.Flags().StringVar(&addr, "addr", "127.0.0.1:8470", "listen address HOST:PORT")
	c.Flags().StringVar(&blobs, "blobs", "", blobsFlagHelp)
	c.Flags().StringVar(&masterFile, "master-key", "", "master key file (else FLOWCAT_MASTER_KEY, FLOWCAT_MASTER_KEY_FILE, or DIR/master.key)")
	c.Flags().Int64Var(&maxUpload, "max-upload-bytes", 8<<30, "largest upload body accepted, in bytes as sent (gzip counts compressed; 413 above)")
	c.Flags().IntVar(&maxUploads, "max-uploads-per-token", server.DefaultMaxUploadsPerToken, "uploads one token may have in progress at once (429 above)")
	c.Flags().DurationVar(&bodyIdle, "body-idle-timeout", server.DefaultBodyIdleTimeout, "longest wait for the next byte of a request body (408 after)")
	c.Flags().IntVar(&lim.MaxLineBytes, "max-line-bytes", schema.DefaultMaxLineBytes, "longest line of an uploaded file (CSV/TSV physical line, JSON Lines line)")
	c.Flags().IntVar(&lim.MaxColumns, "max-columns", schema.DefaultMaxColumns, "most columns in an uploaded CSV/TSV header")
	c.Flags().Int64Var(&lim.MaxBytes, "max-decompressed-bytes", schema.DefaultMaxBytes, "largest uploaded file after gzip decompression")
	c.Flags().Int64Var(&lim.MaxRows, "max-rows", schema.DefaultMaxRows, "most data rows in one uploaded file")
	c.Flags().Float64Var(&rateLimit, "rate-limit", server.DefaultRateLimit, "requests a second one token may send (429 with Retry-After above; negative: no limit)")
	c.Flags().IntVar(&rateBurst, "rate-burst", server.DefaultRateBurst, "requests one token may send at once before --rate-limit applies")
	c.Flags().StringVar(&tlsCert, "tls-cert", "", "certificate chain file (PEM): serve HTTPS (with --tls-key)")
	c.Flags().StringVar(&tlsKey, "tls-key", "", "private key file (PEM) of --tls-cert")
	c.Flags().StringVar(&author, "citation-author", "", "author named in CITATION.cff files, e.g. the lab (default: the project's title)")
	c.Flags().StringVar(&logLevel, "log-level", "info", "least severe log records written: debug, info, warn or error (each request is logged at info)")
	c.Flags().Int64Var(&changeWindow, "change-window-bytes", catalog.DefaultChangeWindowBytes, "bytes an upload with stable event ids may keep to find changed events 24 h either way (past it the look-around narrows; the upload says so)")
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
	rateLimit      float64
	rateBurst      int
	tlsCert        string // certificate chain file (PEM); with tlsKey, serve HTTPS
	tlsKey         string
	now            func() time.Time // the catalog's clock; nil: time.Now (the demo's simulated nights)
	changeWindow   int64            // catalog.Options.ChangeWindowBytes
}

// running is a started server.
type running struct {
	url        string
	masterFrom string
	auth       *server.Authority
	store      *catalog.Store
	hs         *http.Server
	done       chan error
	close      func() error
}

func startServer(ctx context.Context, d dataDir, addr, masterFile string, so serverOptions, log *slog.Logger) (*running, error) {
	if _, err := d.readInstance(); err != nil {
		return nil, err
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("serve: %w", err)
	}
	return startServerOn(ctx, d, ln, masterFile, so, log)
}

// startServerOn serves on a listener already open (the demo opens its
// port before it creates anything); it closes ln when it fails.
func startServerOn(ctx context.Context, d dataDir, ln net.Listener, masterFile string, so serverOptions, log *slog.Logger) (*running, error) {
	addr := ln.Addr().String()
	if _, err := d.readInstance(); err != nil {
		ln.Close()
		return nil, err
	}
	master, from, err := d.findMasterKey(masterFile)
	if err != nil {
		ln.Close()
		return nil, fmt.Errorf("serve: %w", err)
	}
	auth, err := d.authority()
	if err != nil {
		ln.Close()
		return nil, fmt.Errorf("serve: %w", err)
	}
	st, err := d.openStoreWith(master, log, catalog.Options{Limits: so.limits, Now: so.now, ChangeWindowBytes: so.changeWindow})
	if err != nil {
		ln.Close()
		return nil, fmt.Errorf("serve: %w", err)
	}
	if n, err := st.ImportTokenSpool(context.Background(), d.tokenSpool()); err != nil {
		st.Close()
		ln.Close()
		return nil, fmt.Errorf("serve: %w", err)
	} else if n > 0 {
		log.Info("token records imported from the spool", "tokens", n)
	}
	var cert tls.Certificate
	if so.tlsCert != "" {
		// Read before serving, so that a bad pair fails at once, by name.
		if cert, err = tls.LoadX509KeyPair(so.tlsCert, so.tlsKey); err != nil {
			st.Close()
			ln.Close()
			return nil, fmt.Errorf("serve: --tls-cert %s, --tls-key %s: %w", so.tlsCert, so.tlsKey, err)
		}
	}
	scheme := "http"
	if so.tlsCert != "" {
		scheme = "https"
	} else if !loopback(ln.Addr()) {
		log.Warn("SERVING WITHOUT TLS ON A NON-LOOPBACK ADDRESS: tokens and data cross the network in clear text; give --tls-cert and --tls-key, or serve on 127.0.0.1 behind a TLS proxy", "addr", ln.Addr().String())
	}
	srv := server.New(server.Config{Store: st, Authority: auth, Logger: log, TokenSpool: d.tokenSpool(), RateLimit: so.rateLimit, RateBurst: so.rateBurst, MaxUploadBytes: so.maxUpload, MaxUploadsPerToken: so.maxUploads, BodyIdleTimeout: so.bodyIdle, CitationAuthor: so.citationAuthor})
	hs := srv.HTTPServer(addr)
	r := &running{url: scheme + "://" + ln.Addr().String(), masterFrom: from, auth: auth, store: st, hs: hs, done: make(chan error, 1), close: st.Close}
	if so.tlsCert != "" {
		hs.TLSConfig = &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS12}
		go func() { r.done <- hs.ServeTLS(server.Listener(ln), "", "") }()
	} else {
		go func() { r.done <- hs.Serve(server.Listener(ln)) }()
	}
	return r, nil
}

// loopback reports whether a listening address is a loopback one.
func loopback(a net.Addr) bool {
	ta, ok := a.(*net.TCPAddr)
	return ok && ta.IP.IsLoopback()
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
