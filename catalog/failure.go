package catalog

import (
	"context"
	"errors"
	"io"
	"os"
	"syscall"

	"github.com/flowcat-catalog/flowcat/schema"
)

// Errors of an upload that failed for a reason other than its file. Each
// comes with the upload's record (IngestResult.Upload), status failed.
var (
	// ErrNoSpace: the disk (temp folder, blob store or catalog) is full.
	ErrNoSpace = errors.New("no space left on the server's disk")
	// ErrClientGone: the client went away before the upload was done.
	ErrClientGone = errors.New("the client went away")
	// ErrUploadTooLarge is for the caller to wrap around the error its
	// body reader gives past the caller's size limit.
	ErrUploadTooLarge = errors.New("the upload is larger than the server's limit")
	// ErrBodyTimeout: no byte of the body came for too long (the caller's
	// reader fails with os.ErrDeadlineExceeded).
	ErrBodyTimeout = errors.New("the upload's body stalled")
)

// Rules of the upload error recorded for those failures.
const (
	RuleDiskFull    = "disk_full"
	RuleClientGone  = "client_gone"
	RuleTooLarge    = "too_large"
	RuleBodyTimeout = "body_timeout"
	RuleInternal    = "internal"
)

// failure classifies an error that ended an ingest: the rule and message
// for the upload record and the sentinel the caller branches on (nil for a
// fault of the file itself or an internal one).
func failure(ctx context.Context, err error) (rule, msg string, sentinel error) {
	fe, isFile := schema.AsFileError(err)
	switch {
	case errors.Is(err, ErrUploadTooLarge):
		return RuleTooLarge, ErrUploadTooLarge.Error(), ErrUploadTooLarge
	case errors.Is(err, syscall.ENOSPC) || errors.Is(err, syscall.EDQUOT):
		return RuleDiskFull, ErrNoSpace.Error() + "; nothing of the upload was kept", ErrNoSpace
	case errors.Is(err, os.ErrDeadlineExceeded):
		return RuleBodyTimeout, ErrBodyTimeout.Error() + "; nothing of the upload was kept", ErrBodyTimeout
	case ctx.Err() != nil || errors.Is(err, context.Canceled),
		isFile && fe.Rule == schema.RuleRead && errors.Is(err, io.ErrUnexpectedEOF):
		return RuleClientGone, ErrClientGone.Error() + " before the upload was done; nothing of it was kept", ErrClientGone
	case isFile:
		return fe.Rule, fe.Msg, nil
	}
	return RuleInternal, "the server failed; its log has the details; nothing of the upload was kept", nil
}
