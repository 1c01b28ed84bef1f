package server

import (
	"bufio"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/flowcat-catalog/flowcat/catalog"
)

// rawUpload opens a connection and sends an upload's head and the first
// `part` bytes of data (Content-Length says all of it).
func (e *testEnv) rawUpload(token, dataset string, data []byte, part int) net.Conn {
	e.t.Helper()
	conn := e.dial()
	fmt.Fprintf(conn, "POST /api/v1/projects/ward/datasets/%s/uploads?filename=raw.csv HTTP/1.1\r\nHost: x\r\nAuthorization: Bearer %s\r\nContent-Type: text/csv\r\nContent-Length: %d\r\n\r\n", dataset, token, len(data))
	if _, err := conn.Write(data[:part]); err != nil {
		e.t.Fatal(err)
	}
	return conn
}

// dial connects to the server.
func (e *testEnv) dial() net.Conn {
	e.t.Helper()
	conn, err := net.Dial("tcp", e.srv.Listener.Addr().String())
	if err != nil {
		e.t.Fatal(err)
	}
	return conn
}

// readRaw reads one answer from conn (within 20 s).
func readRaw(e *testEnv, conn interface{ Close() error }) response {
	e.t.Helper()
	c := conn.(net.Conn)
	c.SetReadDeadline(time.Now().Add(20 * time.Second))
	res, err := http.ReadResponse(bufio.NewReader(c), nil)
	if err != nil {
		e.t.Fatalf("no answer: %v", err)
	}
	defer res.Body.Close()
	b, _ := io.ReadAll(res.Body)
	e.rec.mu.Lock()
	e.rec.bodies = append(e.rec.bodies, b)
	e.rec.mu.Unlock()
	return response{Status: res.StatusCode, Header: res.Header, Body: b}
}

// waitUpload polls the dataset's uploads until there are n, and returns
// the last.
func (e *testEnv) waitUpload(dataset string, n int) catalog.Upload {
	e.t.Helper()
	deadline := time.Now().Add(30 * time.Second)
	for {
		ups := e.uploads("ward", dataset)
		if len(ups) >= n {
			return ups[len(ups)-1]
		}
		if time.Now().After(deadline) {
			e.t.Fatalf("%d uploads recorded after 30 s, want %d", len(ups), n)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// TestClientGone: a client that hangs up mid-body, or right after sending
// the whole body (while the server sorts and writes), leaves an upload
// record with rule client_gone and no version.
func TestClientGone(t *testing.T) {
	e := newEnv(t)
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	partner := e.partner("ward/events")
	big := bigWardFile(150000)

	conn := e.rawUpload(partner, "events", big, len(big)/3)
	conn.Close()
	u := e.waitUpload("events", 1)
	if u.Status != catalog.UploadFailed || u.Error == nil || u.Error.Rule != catalog.RuleClientGone || u.Bytes == 0 || u.Bytes >= int64(len(big)) {
		t.Errorf("mid-body hang-up recorded as %+v (error %+v)", u, u.Error)
	}

	conn = e.rawUpload(partner, "events", big, len(big))
	conn.Close()
	u = e.waitUpload("events", 2)
	if u.Status != catalog.UploadFailed || u.Error == nil || u.Error.Rule != catalog.RuleClientGone {
		t.Errorf("hang-up after the body recorded as %+v (error %+v)", u, u.Error)
	}
	if n := len(e.versions("ward", "events")); n != 0 {
		t.Errorf("%d versions after two hang-ups", n)
	}
	e.mustStatus(e.upload("ward", "events", partner, "good.csv", wardFile(2, 9)), http.StatusCreated, "good upload after the hang-ups")
	checkNoRawIDs(t, e, rawCase, rawResource, rawSubject)
}

// TestUploadsPerToken: with a limit of one upload in progress per token,
// a second upload of the same token is 429 while the first streams; a
// different token is not held up.
func TestUploadsPerToken(t *testing.T) {
	e := newEnv(t, func(c *Config) { c.MaxUploadsPerToken = 1 })
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	p1, p2 := e.partner("ward/events"), e.partner("ward/events")
	slow := e.rawUpload(p1, "events", wardFile(1, 30), 40)
	defer slow.Close()
	// Wait until the slow upload holds its token's slot.
	deadline := time.Now().Add(10 * time.Second)
	for {
		e.server.mu.Lock()
		n := len(e.server.uploading)
		e.server.mu.Unlock()
		if n == 1 {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("the slow upload never reached the handler")
		}
		time.Sleep(10 * time.Millisecond)
	}
	r := e.upload("ward", "events", p1, "second.csv", wardFile(2, 9))
	if r.Status != http.StatusTooManyRequests {
		t.Fatalf("second upload of the token: status %d, want 429", r.Status)
	}
	if b := e.apiErr(r); b.Error.Code != "too_many_uploads" || !strings.Contains(b.Error.Message, "max-uploads-per-token") {
		t.Errorf("429 error %+v", b.Error)
	}
	e.mustStatus(e.upload("ward", "events", p2, "other.csv", wardFile(3, 9)), http.StatusCreated, "another token's upload")
	slow.Close()
	e.waitUpload("events", 2)
	deadline = time.Now().Add(10 * time.Second)
	for {
		r := e.upload("ward", "events", p1, "later.csv", wardFile(4, 9))
		if r.Status == http.StatusCreated {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("the token's upload after the first ended: status %d", r.Status)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// TestBodyIdleTimeout: an upload whose body stalls is answered 408 after
// the idle timeout, with its record.
func TestBodyIdleTimeout(t *testing.T) {
	e := newEnv(t, func(c *Config) { c.BodyIdleTimeout = 300 * time.Millisecond })
	e.createProject("ward")
	e.createDataset("ward", "events", wardProfile)
	partner := e.partner("ward/events")
	data := wardFile(1, 30)
	conn := e.rawUpload(partner, "events", data, len(data)/2)
	defer conn.Close()
	conn.SetReadDeadline(time.Now().Add(20 * time.Second))
	res, err := http.ReadResponse(bufio.NewReader(conn), nil)
	if err != nil {
		t.Fatalf("no answer to a stalled body: %v", err)
	}
	body, _ := io.ReadAll(res.Body)
	var b apiErrorBody
	json.Unmarshal(body, &b)
	if res.StatusCode != http.StatusRequestTimeout || b.Error.Code != "body_timeout" || !strings.Contains(b.Error.Message, "body-idle-timeout") {
		t.Fatalf("status %d body %s; want 408 body_timeout", res.StatusCode, body)
	}
	if u := b.Error.Upload; u == nil || u.Status != catalog.UploadFailed || u.Error == nil || u.Error.Rule != catalog.RuleBodyTimeout {
		t.Errorf("upload in the answer %+v", u)
	}
	if n := len(e.versions("ward", "events")); n != 0 {
		t.Errorf("%d versions after a stalled body", n)
	}
	// A body that keeps coming, however slowly, is not cut.
	e.mustStatus(e.upload("ward", "events", partner, "good.csv", wardFile(2, 9)), http.StatusCreated, "good upload")
}
