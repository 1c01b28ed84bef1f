package server

import (
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/labstack/echo/v4"
	"golang.org/x/sys/unix"
)

// unsentOf returns the bytes c's socket holds not yet sent (SIOCOUTQNSD,
// tcp(7)), -1 when it cannot read them. It runs on the handler's
// goroutine, so it reports rather than fails the test.
func unsentOf(c *sendConn) int {
	rc, err := c.SyscallConn()
	if err != nil {
		return -1
	}
	v, ierr := -1, error(nil)
	if err := rc.Control(func(fd uintptr) { v, ierr = unix.IoctlGetInt(int(fd), unix.SIOCOUTQNSD) }); err != nil || ierr != nil {
		return -1
	}
	return v
}

// sendsOf serves one answer of body through the server's own http.Server
// and Listener on loopback, written by handle, and returns the writes its
// connection made to the socket for that answer, after checking the
// answer arrived whole.
func sendsOf(t *testing.T, body string, handle func(c echo.Context) error) int {
	t.Helper()
	sends := make(chan int, 1)
	e := echo.New()
	e.GET("/", func(c echo.Context) error {
		conn := c.Request().Context().Value(connKey{}).(*sendConn)
		before := conn.sends
		err := handle(c)
		http.NewResponseController(c.Response().Writer).Flush() //nolint:errcheck // the client sees a failure
		sends <- conn.sends - before
		return err
	})
	srv := httptest.NewUnstartedServer(e)
	srv.Config = (&Server{}).HTTPServer("")
	srv.Config.Handler = e
	srv.Listener = Listener(srv.Listener)
	srv.Start()
	defer srv.Close()
	resp, err := http.Get(srv.URL)
	if err != nil {
		t.Fatal(err)
	}
	got, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if string(got) != body || resp.ContentLength != int64(len(body)) {
		t.Errorf("answer of %d bytes (Content-Length %d), want %d", len(got), resp.ContentLength, len(body))
	}
	return <-sends
}

// TestOneSendOneWrite: through the server's own http.Server on loopback,
// an answer written under oneSend leaves in one write to the socket (its
// header and body together) and arrives whole; the same answer without it
// takes net/http's two (its 4 KiB buffer, then the rest), so the count
// tells them apart.
func TestOneSendOneWrite(t *testing.T) {
	body := strings.Repeat("stored summary bytes ", 2000) // 42 kB: more than net/http's 4 KiB buffer
	for _, small := range []string{body, "{}"} {
		held := sendsOf(t, small, func(c echo.Context) error {
			c.Response().Header().Set(echo.HeaderContentLength, strconv.Itoa(len(small)))
			defer oneSend(c)()
			return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, []byte(small))
		})
		if held != 1 {
			t.Errorf("%d-byte answer under oneSend: %d writes to the socket, want 1", len(small), held)
		}
	}
	plain := sendsOf(t, body, func(c echo.Context) error {
		c.Response().Header().Set(echo.HeaderContentLength, strconv.Itoa(len(body)))
		return c.Blob(http.StatusOK, echo.MIMEApplicationJSON, []byte(body))
	})
	if plain != 2 {
		t.Errorf("42 kB answer without oneSend: %d writes to the socket, want net/http's 2", plain)
	}
}

// TestSendConnKeepsSendfile: a file answered as a download is
// (sendWhole) still goes by the connection's ReadFrom (sendfile) in one
// call, its header sent ahead marked as having more to follow, and
// arrives whole. An empty file leaves ReadFrom nothing to send: the held
// header must not wait for more (the push; without it, 200 ms).
func TestSendConnKeepsSendfile(t *testing.T) {
	for _, size := range []int{280000, 512, 100, 0} {
		body := strings.Repeat("p", size)
		path := filepath.Join(t.TempDir(), "blob")
		if err := os.WriteFile(path, []byte(body), 0o600); err != nil {
			t.Fatal(err)
		}
		var conn *sendConn
		unsent := -1
		n := sendsOf(t, body, func(c echo.Context) error {
			conn = c.Request().Context().Value(connKey{}).(*sendConn)
			f, err := os.Open(path)
			if err != nil {
				return err
			}
			defer f.Close()
			c.Response().Header().Set(echo.HeaderContentLength, strconv.Itoa(len(body)))
			sendWhole(c, f, int64(size))
			unsent = 0
			if size <= 512 {
				// Sent by now, not held for more (a larger file may
				// still wait for the reader's window).
				unsent = unsentOf(conn)
			}
			return nil
		})
		wantPush := 0
		if size == 0 {
			wantPush = 1
		}
		if unsent != 0 {
			t.Errorf("%d-byte file: %d bytes left unsent after the copy, want 0", size, unsent)
		}
		if n != 2 || conn.moreSends != 1 || conn.pushes != wantPush {
			t.Errorf("%d-byte file: %d writes to the socket, %d marked more, %d pushes; want 2, 1, %d",
				size, n, conn.moreSends, conn.pushes, wantPush)
		}
	}
}
