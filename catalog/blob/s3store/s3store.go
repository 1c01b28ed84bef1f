// Package s3store is the blob.Store on an S3-compatible object store: each
// blob is the object <prefix>/sha256/<2 hex>/<64 hex> of one bucket, the
// same names as on local disk.
//
// # Atomicity
//
// A blob is visible whole or not at all. Put reads the bytes in parts of
// PartSize, hashing them as they pass. A blob of one part is hashed
// before it is sent, and sent in one request only when it matches its id.
// A larger blob is sent as a multipart upload, which the server keeps
// invisible until it is completed; Put completes it only once the last
// part's bytes hash to the id, and aborts it on any failure (a wrong
// hash, a read error, a cancelled context). A crash mid-upload leaves an
// incomplete multipart upload, which holds storage but names no object:
// SweepTemp (run by catalog.Open and by the collector) aborts those under
// the prefix.
//
// # Memory
//
// A Put holds one part (PartSize, default 8 MiB) in memory and sends the
// parts one after another; Open reads by ranged GET requests and holds
// nothing but the buffer of the caller.
package s3store

import (
	"bytes"
	"context"
	"crypto/md5"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strings"
	"sync"
	"time"

	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"

	"github.com/flowcat-catalog/flowcat/catalog/blob"
)

// DefaultPartSize is the part size of a multipart upload when Config does
// not say: what one Put holds in memory.
const DefaultPartSize = 8 << 20

// MinPartSize is the smallest part S3 accepts in a multipart upload but
// for the last one (Amazon S3 User Guide, "Amazon S3 multipart upload
// limits": 5 MiB).
const MinPartSize = 5 << 20

// MaxParts is the most parts one multipart upload may have (the same
// source: 10,000). A blob larger than MaxParts x PartSize is refused.
const MaxParts = 10000

// Config says where the store is and how to reach it.
type Config struct {
	Bucket string
	// Prefix is the key prefix of every object, without leading or
	// trailing slashes; "" puts the objects at the bucket's root.
	Prefix string
	// Endpoint is the server's URL: http://host:port or https://host:port.
	Endpoint string
	// Region is sent in request signatures; default us-east-1.
	Region string
	// Credentials sign the requests; nil sends anonymous requests.
	Credentials *credentials.Credentials
	// PartSize is the size of each part of a multipart upload, at least
	// MinPartSize; default DefaultPartSize.
	PartSize int64
	// Transport is the HTTP transport; default a clone of
	// http.DefaultTransport.
	Transport http.RoundTripper
}

// ParseURL splits s3://bucket/prefix into the bucket and the prefix
// (slashes trimmed). The bucket must follow S3's naming rules (3 to 63
// lowercase letters, digits, dots and hyphens).
func ParseURL(s string) (bucket, prefix string, err error) {
	u, err := url.Parse(s)
	if err != nil || u.Scheme != "s3" || u.Host == "" || u.RawQuery != "" || u.Fragment != "" || u.User != nil {
		return "", "", fmt.Errorf("blob store %q: want s3://BUCKET/PREFIX", s)
	}
	if err := checkBucket(u.Host); err != nil {
		return "", "", fmt.Errorf("blob store %q: %w", s, err)
	}
	prefix = strings.Trim(u.Path, "/")
	for _, seg := range strings.Split(prefix, "/") {
		if prefix != "" && (seg == "" || seg == "." || seg == "..") {
			return "", "", fmt.Errorf("blob store %q: the prefix has an empty, . or .. segment", s)
		}
	}
	return u.Host, prefix, nil
}

// checkBucket applies the bucket naming rules of the Amazon S3 User Guide
// ("General purpose bucket naming rules"), the ones every S3-compatible
// server accepts.
func checkBucket(b string) error {
	if len(b) < 3 || len(b) > 63 {
		return fmt.Errorf("bucket name %q: want 3 to 63 characters", b)
	}
	for i, r := range b {
		ok := r >= 'a' && r <= 'z' || r >= '0' && r <= '9' || (r == '.' || r == '-') && i > 0 && i < len(b)-1
		if !ok {
			return fmt.Errorf("bucket name %q: want lowercase letters, digits, dots and hyphens, starting and ending with a letter or digit", b)
		}
	}
	return nil
}

// Store is a blob.Store in one bucket under one prefix.
type Store struct {
	cl       *minio.Client
	core     minio.Core
	bucket   string
	prefix   string // "" or ending in "/"
	partSize int64

	mu       sync.Mutex
	inflight map[string]bool // upload ids of multipart uploads Put is sending
}

// New connects to the store and checks that the bucket exists (a missing
// bucket or refused credentials fail here, not at the first upload).
func New(ctx context.Context, cfg Config) (*Store, error) {
	cl, prefix, ps, err := connect(ctx, cfg)
	if err != nil {
		return nil, err
	}
	return &Store{cl: cl, core: minio.Core{Client: cl}, bucket: cfg.Bucket, prefix: prefix, partSize: ps, inflight: map[string]bool{}}, nil
}

// connect makes a client of cfg and checks that the bucket exists. It
// returns the prefix as "" or ending in "/", and the part size.
func connect(ctx context.Context, cfg Config) (*minio.Client, string, int64, error) {
	if err := checkBucket(cfg.Bucket); err != nil {
		return nil, "", 0, fmt.Errorf("s3store: %w", err)
	}
	u, err := url.Parse(cfg.Endpoint)
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" || (u.Path != "" && u.Path != "/") {
		return nil, "", 0, fmt.Errorf("s3store: endpoint %q: want http://HOST:PORT or https://HOST:PORT", cfg.Endpoint)
	}
	ps := cfg.PartSize
	if ps == 0 {
		ps = DefaultPartSize
	}
	if ps < MinPartSize {
		return nil, "", 0, fmt.Errorf("s3store: part size %d: want at least %d (5 MiB, the S3 minimum)", ps, MinPartSize)
	}
	region := cfg.Region
	if region == "" {
		region = "us-east-1"
	}
	tr := cfg.Transport
	if tr == nil {
		tr = http.DefaultTransport.(*http.Transport).Clone()
	}
	creds := cfg.Credentials
	if creds == nil {
		creds = credentials.NewStatic("", "", "", credentials.SignatureAnonymous)
	}
	cl, err := minio.New(u.Host, &minio.Options{
		Creds:        creds,
		Secure:       u.Scheme == "https",
		Region:       region,
		Transport:    tr,
		BucketLookup: minio.BucketLookupPath,
	})
	if err != nil {
		return nil, "", 0, fmt.Errorf("s3store: %w", err)
	}
	prefix := ""
	if p := strings.Trim(cfg.Prefix, "/"); p != "" {
		prefix = p + "/"
	}
	where := "s3://" + cfg.Bucket + "/" + strings.TrimSuffix(prefix, "/")
	ok, err := cl.BucketExists(ctx, cfg.Bucket)
	if err != nil {
		return nil, "", 0, fmt.Errorf("s3store: %s: %w", where, err)
	}
	if !ok {
		return nil, "", 0, fmt.Errorf("s3store: %s: no such bucket on %s; create it first", where, cfg.Endpoint)
	}
	return cl, prefix, ps, nil
}

// where names the store in messages: s3://bucket/prefix.
func (s *Store) where() string { return "s3://" + s.bucket + "/" + strings.TrimSuffix(s.prefix, "/") }

// String returns s3://bucket/prefix.
func (s *Store) String() string { return s.where() }

func (s *Store) key(id blob.ID) string {
	h := id.String()
	return s.prefix + "sha256/" + h[:2] + "/" + h
}

// notFound reports whether err is the server saying the object is not there.
func notFound(err error) bool {
	r := minio.ToErrorResponse(err)
	return r.StatusCode == http.StatusNotFound || r.Code == minio.NoSuchKey || r.Code == "NotFound"
}

// Put implements blob.Store.
func (s *Store) Put(ctx context.Context, id blob.ID, r io.Reader) error {
	if _, err := s.Stat(ctx, id); err == nil {
		return nil
	} else if !errors.Is(err, blob.ErrNotFound) {
		return err
	}
	key := s.key(id)
	buf := make([]byte, s.partSize)
	h := sha256.New()
	n, err := io.ReadFull(ctxReader{ctx, r}, buf)
	if err == io.EOF || err == io.ErrUnexpectedEOF {
		// One part: hash first, then send.
		h.Write(buf[:n])
		if got := blob.ID(h.Sum(nil)); got != id {
			return fmt.Errorf("s3store: put %s: got %s: %w", id, got, blob.ErrCorrupt)
		}
		m := md5.Sum(buf[:n])
		_, err := s.core.PutObject(ctx, s.bucket, key, bytes.NewReader(buf[:n]), int64(n),
			base64.StdEncoding.EncodeToString(m[:]), id.String(), minio.PutObjectOptions{ContentType: "application/octet-stream", DisableContentSha256: true})
		if err != nil {
			return fmt.Errorf("s3store: put %s: %w", id, err)
		}
		return s.checkSize(ctx, id, int64(n))
	}
	if err != nil {
		return fmt.Errorf("s3store: put %s: %w", id, err)
	}
	return s.putParts(ctx, id, key, ctxReader{ctx, r}, buf, h)
}

// putParts sends a blob of more than one part: buf holds the first part,
// full. The upload is completed only when every byte hashes to id.
func (s *Store) putParts(ctx context.Context, id blob.ID, key string, r io.Reader, buf []byte, h interface {
	io.Writer
	Sum([]byte) []byte
}) (err error) {
	uploadID, err := s.core.NewMultipartUpload(ctx, s.bucket, key, minio.PutObjectOptions{ContentType: "application/octet-stream"})
	if err != nil {
		return fmt.Errorf("s3store: put %s: %w", id, err)
	}
	s.mu.Lock()
	s.inflight[uploadID] = true
	s.mu.Unlock()
	completed := false
	defer func() {
		if !completed {
			// Abort even when ctx has ended; bounded so a dead server
			// does not hold the caller.
			actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 30*time.Second)
			if aerr := s.core.AbortMultipartUpload(actx, s.bucket, key, uploadID); aerr != nil && err != nil {
				err = fmt.Errorf("%w (and the incomplete upload was not aborted: %v; the next sweep removes it)", err, aerr)
			}
			cancel()
		}
		s.mu.Lock()
		delete(s.inflight, uploadID)
		s.mu.Unlock()
	}()
	var parts []minio.CompletePart
	var sent int64
	n := len(buf)
	for {
		if len(parts) == MaxParts {
			return fmt.Errorf("s3store: put %s: larger than %d parts of %d bytes, the most one upload may have", id, MaxParts, len(buf))
		}
		h.Write(buf[:n])
		if parts, err = s.sendPart(ctx, id, key, uploadID, parts, buf[:n]); err != nil {
			return err
		}
		sent += int64(n)
		n, err = io.ReadFull(r, buf)
		if err == io.EOF {
			break
		}
		if err != nil && err != io.ErrUnexpectedEOF {
			return fmt.Errorf("s3store: put %s: %w", id, err)
		}
		if err == io.ErrUnexpectedEOF {
			// The last, short part: hash it before sending, so a wrong
			// blob sends no more.
			h.Write(buf[:n])
			if got := blob.ID(h.Sum(nil)); got != id {
				return fmt.Errorf("s3store: put %s: got %s: %w", id, got, blob.ErrCorrupt)
			}
			if parts, err = s.sendPart(ctx, id, key, uploadID, parts, buf[:n]); err != nil {
				return err
			}
			return s.complete(ctx, id, key, uploadID, parts, sent+int64(n), &completed)
		}
	}
	if got := blob.ID(h.Sum(nil)); got != id {
		return fmt.Errorf("s3store: put %s: got %s: %w", id, got, blob.ErrCorrupt)
	}
	return s.complete(ctx, id, key, uploadID, parts, sent, &completed)
}

// sendPart sends one part, signed with its SHA-256 and carrying its MD5
// (Content-MD5), so the server checks that it received these bytes.
func (s *Store) sendPart(ctx context.Context, id blob.ID, key, uploadID string, parts []minio.CompletePart, b []byte) ([]minio.CompletePart, error) {
	sum := sha256.Sum256(b)
	m := md5.Sum(b)
	p, err := s.core.PutObjectPart(ctx, s.bucket, key, uploadID, len(parts)+1, bytes.NewReader(b), int64(len(b)), minio.PutObjectPartOptions{
		Sha256Hex: hex.EncodeToString(sum[:]), Md5Base64: base64.StdEncoding.EncodeToString(m[:]), DisableContentSha256: true,
	})
	if err != nil {
		return parts, fmt.Errorf("s3store: put %s: part %d: %w", id, len(parts)+1, err)
	}
	return append(parts, minio.CompletePart{PartNumber: p.PartNumber, ETag: p.ETag}), nil
}

// complete completes the upload and checks the object's size; an object
// of another size (a server that stored other bytes) is removed.
func (s *Store) complete(ctx context.Context, id blob.ID, key, uploadID string, parts []minio.CompletePart, size int64, completed *bool) error {
	if testHookBeforeComplete != nil {
		if err := testHookBeforeComplete(); err != nil {
			return err
		}
	}
	if _, err := s.core.CompleteMultipartUpload(ctx, s.bucket, key, uploadID, parts, minio.PutObjectOptions{}); err != nil {
		return fmt.Errorf("s3store: put %s: complete: %w", id, err)
	}
	*completed = true
	return s.checkSize(ctx, id, size)
}

// checkSize removes the blob and fails when the server holds it with
// another size than was sent.
func (s *Store) checkSize(ctx context.Context, id blob.ID, size int64) error {
	info, err := s.Stat(ctx, id)
	if err != nil {
		return fmt.Errorf("s3store: put %s: %w", id, err)
	}
	if info.Size != size {
		s.Delete(context.WithoutCancel(ctx), id)
		return fmt.Errorf("s3store: put %s: sent %d bytes, the server holds %d: %w", id, size, info.Size, blob.ErrCorrupt)
	}
	return nil
}

// testHookBeforeComplete, when set by a test, runs before a multipart
// upload is completed; an error it returns fails the Put there.
var testHookBeforeComplete func() error

// Open implements blob.Store. The blob is read by ranged GET requests.
func (s *Store) Open(ctx context.Context, id blob.ID) (blob.Reader, error) {
	obj, err := s.cl.GetObject(ctx, s.bucket, s.key(id), minio.GetObjectOptions{})
	if err != nil {
		return nil, fmt.Errorf("s3store: open %s: %w", id, err)
	}
	info, err := obj.Stat()
	if err != nil {
		obj.Close()
		if notFound(err) {
			return nil, fmt.Errorf("s3store: %s: %w", id, blob.ErrNotFound)
		}
		return nil, fmt.Errorf("s3store: open %s: %w", id, err)
	}
	return &object{Object: obj, size: info.Size}, nil
}

type object struct {
	*minio.Object
	size int64
}

func (o *object) Size() int64 { return o.size }

// Stat implements blob.Store.
func (s *Store) Stat(ctx context.Context, id blob.ID) (blob.Info, error) {
	info, err := s.cl.StatObject(ctx, s.bucket, s.key(id), minio.StatObjectOptions{})
	if notFound(err) {
		return blob.Info{}, fmt.Errorf("s3store: %s: %w", id, blob.ErrNotFound)
	}
	if err != nil {
		return blob.Info{}, fmt.Errorf("s3store: stat %s: %w", id, err)
	}
	return blob.Info{ID: id, Size: info.Size, ModTime: info.LastModified}, nil
}

// List implements blob.Store: every object under <prefix>/sha256/ whose
// name is a blob id at its place.
func (s *Store) List(ctx context.Context, fn func(blob.Info) error) error {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel() // ends the listing goroutine when fn stops early
	root := s.prefix + "sha256/"
	for obj := range s.cl.ListObjects(ctx, s.bucket, minio.ListObjectsOptions{Prefix: root, Recursive: true}) {
		if obj.Err != nil {
			return fmt.Errorf("s3store: list %s: %w", s.where(), obj.Err)
		}
		rest := strings.TrimPrefix(obj.Key, root)
		fan, name, ok := strings.Cut(rest, "/")
		id, err := blob.ParseID(name)
		if !ok || err != nil || fan != name[:2] {
			continue // not ours
		}
		if err := fn(blob.Info{ID: id, Size: obj.Size, ModTime: obj.LastModified}); err != nil {
			return err
		}
	}
	return ctx.Err()
}

// Delete implements blob.Store.
func (s *Store) Delete(ctx context.Context, id blob.ID) error {
	err := s.cl.RemoveObject(ctx, s.bucket, s.key(id), minio.RemoveObjectOptions{})
	if err != nil && !notFound(err) {
		return fmt.Errorf("s3store: delete %s: %w", id, err)
	}
	return nil
}

// SweepTemp implements blob.TempSweeper: it aborts the incomplete
// multipart uploads under <prefix>/sha256/ that no Put of this Store is
// sending, initiated more than olderThan ago (all of them when
// olderThan <= 0). It reports how many it found and the bytes of their
// parts.
func (s *Store) SweepTemp(ctx context.Context, olderThan time.Duration, dryRun bool) (files int, bytes int64, err error) {
	root := s.prefix + "sha256/"
	now := time.Now()
	var keyMarker, idMarker string
	for {
		res, err := s.core.ListMultipartUploads(ctx, s.bucket, root, keyMarker, idMarker, "", 1000)
		if minio.ToErrorResponse(err).Code == "NoSuchUpload" {
			// gofakes3 answers so when there are none.
			return files, bytes, nil
		}
		if err != nil {
			return files, bytes, fmt.Errorf("s3store: list incomplete uploads of %s: %w", s.where(), err)
		}
		for _, u := range res.Uploads {
			if !strings.HasPrefix(u.Key, root) {
				continue
			}
			if olderThan > 0 && now.Sub(u.Initiated) < olderThan {
				continue
			}
			s.mu.Lock()
			busy := s.inflight[u.UploadID]
			s.mu.Unlock()
			if busy {
				continue
			}
			size := s.partBytes(ctx, u.Key, u.UploadID)
			if !dryRun {
				err := s.core.AbortMultipartUpload(ctx, s.bucket, u.Key, u.UploadID)
				if err != nil && minio.ToErrorResponse(err).Code != "NoSuchUpload" {
					return files, bytes, fmt.Errorf("s3store: abort incomplete upload of %s: %w", u.Key, err)
				}
			}
			files++
			bytes += size
		}
		if !res.IsTruncated || (res.NextKeyMarker == "" && res.NextUploadIDMarker == "") {
			return files, bytes, nil
		}
		keyMarker, idMarker = res.NextKeyMarker, res.NextUploadIDMarker
	}
}

// partBytes adds up the sizes of an incomplete upload's parts (0 when
// they cannot be listed: the count matters, the bytes inform).
func (s *Store) partBytes(ctx context.Context, key, uploadID string) int64 {
	var total int64
	marker := 0
	for {
		res, err := s.core.ListObjectParts(ctx, s.bucket, key, uploadID, marker, 1000)
		if err != nil {
			return total
		}
		for _, p := range res.ObjectParts {
			total += p.Size
		}
		if !res.IsTruncated || res.NextPartNumberMarker <= marker {
			return total
		}
		marker = res.NextPartNumberMarker
	}
}

// ctxReader stops a copy when its context ends.
type ctxReader struct {
	ctx context.Context
	r   io.Reader
}

func (c ctxReader) Read(p []byte) (int, error) {
	if err := c.ctx.Err(); err != nil {
		return 0, err
	}
	return c.r.Read(p)
}
