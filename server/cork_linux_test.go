package server

import (
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"syscall"
	"testing"

	"github.com/labstack/echo/v4"
)

// corkOf reads TCP_CORK of c (tcp(7)), -1 when it cannot. It runs on
// the handler's goroutine, so it reports rather than fails the test.
func corkOf(c net.Conn) int {
	rc, err := c.(*net.TCPConn).SyscallConn()
	if err != nil {
		return -1
	}
	v, gerr := -1, error(nil)
	if err := rc.Control(func(fd uintptr) { v, gerr = syscall.GetsockoptInt(int(fd), syscall.IPPROTO_TCP, syscall.TCP_CORK) }); err != nil || gerr != nil {
		return -1
	}
	return v
}

// TestOneSendCorks: through the server's own http.Server on loopback, a
// handler's answer is held (TCP_CORK set) while it is written and sent
// (cleared) once whole, and arrives whole; a connection left corked
// would hold its last partial segment for 200 ms on every answer.
func TestOneSendCorks(t *testing.T) {
	body := strings.Repeat("stored summary bytes ", 2000) // 42 kB: more than net/http's 4 KiB buffer
	corks := make(chan [2]int, 1)                         // TCP_CORK while writing and after
	e := echo.New()
	e.GET("/", func(c echo.Context) error {
		conn := c.Request().Context().Value(connKey{}).(net.Conn)
		c.Response().Header().Set(echo.HeaderContentLength, strconv.Itoa(len(body)))
		send := oneSend(c)
		err := c.Blob(http.StatusOK, echo.MIMEApplicationJSON, []byte(body))
		during := corkOf(conn)
		send()
		corks <- [2]int{during, corkOf(conn)}
		return err
	})
	srv := httptest.NewUnstartedServer(e)
	srv.Config = (&Server{}).HTTPServer("")
	srv.Config.Handler = e
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
	if c := <-corks; c != [2]int{1, 0} {
		t.Errorf("TCP_CORK %d while writing and %d after, want 1 and 0", c[0], c[1])
	}
}
