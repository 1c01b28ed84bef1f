package server

import (
	"bytes"
	"compress/gzip"
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"
	"sync"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/getkin/kin-openapi/openapi3filter"
	"github.com/getkin/kin-openapi/routers"
	"github.com/getkin/kin-openapi/routers/gorillamux"
)

// openAPICheck validates the answers the test helpers receive against the
// server's own OpenAPI document with an independent implementation
// (github.com/getkin/kin-openapi, OpenAPI 3.1 with JSON Schema 2020-12):
// every answer of an API route, its status, media type and body, errors
// included. Any answer the document does not describe fails the test.
type openAPICheck struct {
	router routers.Router
}

// bytesMedia are the media types of answers that are not JSON, YAML or
// text: the document says only their media type, so their body is taken
// as a string of bytes.
var bytesMedia = []string{"application/vnd.apache.parquet", "application/x-tar", "application/zip", "application/xml",
	"application/x-ndjson", "multipart/byteranges", "text/css"}

var registerBytesMedia sync.Once

// loadOpenAPI loads and checks the document doc (the server's, as served).
func loadOpenAPI(t *testing.T, doc []byte) *openAPICheck {
	t.Helper()
	registerBytesMedia.Do(func() {
		for _, mt := range bytesMedia {
			openapi3filter.RegisterBodyDecoder(mt, func(r io.Reader, _ http.Header, _ *openapi3.SchemaRef, _ openapi3filter.EncodingFn) (any, error) {
				b, err := io.ReadAll(r)
				return string(b), err
			})
		}
	})
	l := openapi3.NewLoader()
	d, err := l.LoadFromData(doc)
	if err != nil {
		t.Fatalf("openapi.json does not load: %v", err)
	}
	if err := d.Validate(context.Background()); err != nil {
		t.Fatalf("openapi.json is not a valid OpenAPI document: %v", err)
	}
	router, err := gorillamux.NewRouter(d)
	if err != nil {
		t.Fatalf("openapi.json: routes: %v", err)
	}
	return &openAPICheck{router: router}
}

// check validates one answer (status, headers and body b of req) and
// fails t if the document does not describe it.
func (o *openAPICheck) check(t *testing.T, req *http.Request, res *http.Response, b []byte) {
	t.Helper()
	if err := o.validate(req, res, b); err != nil {
		t.Errorf("OpenAPI: %s %s answered %d %s, not as the document says: %s; body: %s", req.Method, req.URL.Path, res.StatusCode,
			res.Header.Get("Content-Type"), clip(err.Error(), 1500), clip(clipBody(bytes.Clone(b)), 300))
	}
}

// validate is check's rule: nil when the document describes the answer,
// or when the request is not of the API (a page, a path no route serves).
func (o *openAPICheck) validate(req *http.Request, res *http.Response, b []byte) error {
	route, params, err := o.router.FindRoute(req)
	if err != nil {
		// Pages for people and paths no route serves are not in the
		// document; an API path answered by a route must be.
		if strings.HasPrefix(req.URL.Path, "/api/") && res.StatusCode != http.StatusNotFound && res.StatusCode != http.StatusMethodNotAllowed {
			return fmt.Errorf("the document has no such operation: %w", err)
		}
		return nil
	}
	if res.Header.Get("Content-Encoding") == "gzip" {
		zr, err := gzip.NewReader(bytes.NewReader(b))
		if err == nil {
			b, err = io.ReadAll(zr)
		}
		if err != nil {
			return fmt.Errorf("a gzip body that does not read: %w", err)
		}
	}
	in := &openapi3filter.ResponseValidationInput{
		RequestValidationInput: &openapi3filter.RequestValidationInput{Request: req, PathParams: params, Route: route},
		Status:                 res.StatusCode,
		Header:                 res.Header,
		Options:                &openapi3filter.Options{IncludeResponseStatus: true, MultiError: true},
	}
	in.SetBodyBytes(b)
	if err := openapi3filter.ValidateResponse(req.Context(), in); err != nil {
		var re *openapi3filter.ResponseError
		if errors.As(err, &re) && re.Err != nil {
			return fmt.Errorf("%s: %w", re.Reason, re.Err)
		}
		return err
	}
	return nil
}

// checkRequest validates a request the server took (answered 2xx), with
// its JSON body sent, against the document: what the server accepts is
// what the document says it takes, path and query parameters and body.
func (o *openAPICheck) checkRequest(t *testing.T, req *http.Request, sent []byte) {
	t.Helper()
	if err := o.validateRequest(req, sent); err != nil {
		t.Errorf("OpenAPI: the server took %s %s, which the document does not describe: %s; body: %s", req.Method, req.URL.Path,
			clip(err.Error(), 1500), clip(string(sent), 300))
	}
}

// validateRequest is checkRequest's rule: nil when the document
// describes the request with body sent, or when it is not of the API.
func (o *openAPICheck) validateRequest(req *http.Request, sent []byte) error {
	route, params, err := o.router.FindRoute(req)
	if err != nil {
		return nil // not of the API; validate says so of its answer
	}
	r := req.Clone(req.Context())
	r.Body = io.NopCloser(bytes.NewReader(sent))
	in := &openapi3filter.RequestValidationInput{Request: r, PathParams: params, Route: route,
		Options: &openapi3filter.Options{MultiError: true, AuthenticationFunc: openapi3filter.NoopAuthenticationFunc}}
	return openapi3filter.ValidateRequest(req.Context(), in)
}

func clip(s string, n int) string {
	if len(s) > n {
		return s[:n] + "..."
	}
	return s
}
