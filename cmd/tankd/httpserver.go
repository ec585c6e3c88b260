package main

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"net/http"
	"os"
	"strings"
	"time"
)

// Server timeouts: a header must come within readHeaderTimeout and a whole request within
// readTimeout (the largest body is a memory map import); a response within writeTimeout, but
// for the event stream, which lifts its own deadline; an idle keep-alive connection is closed
// after idleTimeout. A clean shutdown waits up to shutdownWait for requests in flight.
const (
	readHeaderTimeout = 5 * time.Second
	readTimeout       = 30 * time.Second
	writeTimeout      = 30 * time.Second
	idleTimeout       = 2 * time.Minute
	shutdownWait      = 3 * time.Second
)

// httpServer is the API's listener and server.
type httpServer struct {
	srv  *http.Server
	ln   net.Listener
	done chan error
	log  *slog.Logger
}

// listen opens the API's listener on addr before anything else starts, so that a port in use
// stops the daemon at once.
func listen(addr string) (net.Listener, error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("http: listen on %s: %w", addr, err)
	}
	return ln, nil
}

// serveHTTP serves h on ln until shutdown.
func serveHTTP(ln net.Listener, h http.Handler, log *slog.Logger) *httpServer {
	s := &httpServer{
		srv: &http.Server{Handler: h, ReadHeaderTimeout: readHeaderTimeout, ReadTimeout: readTimeout,
			WriteTimeout: writeTimeout, IdleTimeout: idleTimeout,
			ErrorLog: slog.NewLogLogger(log.Handler(), slog.LevelWarn)},
		ln: ln, done: make(chan error, 1), log: log,
	}
	go func() {
		err := s.srv.Serve(ln)
		if errors.Is(err, http.ErrServerClosed) {
			err = nil
		}
		s.done <- err
	}()
	log.Info("HTTP API", "listen", ln.Addr().String())
	return s
}

// shutdown stops accepting, lets requests in flight finish for a while, closes what is left
// (event streams), and waits for the server to end.
func (s *httpServer) shutdown() {
	ctx, cancel := context.WithTimeout(context.Background(), shutdownWait)
	defer cancel()
	if err := s.srv.Shutdown(ctx); err != nil {
		s.log.Warn("HTTP shutdown: closing what is left", "err", err)
		_ = s.srv.Close()
	}
	if err := <-s.done; err != nil {
		s.log.Error("HTTP server", "err", err)
	}
}

// readToken reads the bearer token from its file: the whole file, surrounding space trimmed;
// an empty token is refused (the configuration has checked the file's mode already).
func readToken(path string) (string, error) {
	if path == "" {
		return "", nil
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return "", fmt.Errorf("http.token_file: %w", err)
	}
	tok := strings.TrimSpace(string(b))
	if tok == "" {
		return "", fmt.Errorf("http.token_file %q is empty", path)
	}
	return tok, nil
}
