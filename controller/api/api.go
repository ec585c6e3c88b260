package api

import (
	"crypto/sha256"
	"crypto/subtle"
	_ "embed"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"mime"
	"net/http"
	"runtime/debug"
	"slices"
	"strings"
	"sync"
	"time"

	"periph.io/x/conn/v3/physic"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/clock"
)

// Options configure the API. Service is required; the rest are optional.
type Options struct {
	Service *controller.Service
	// Follower, if set, is told every frequency a client sets (POST /api/v1/frequency), and gives
	// the radio link's state; nil: a set frequency is submitted as a Follow directly.
	Follower *controller.Follower
	// Sweeps, if set, serves the sweep recordings; nil: the list is empty and every recording
	// is not found.
	Sweeps SweepStore
	// SetFrequency, if set, moves the radio's VFO to a frequency a client sets, before the loop
	// is asked to follow it, as an operator turning the dial would (the simulator's radio, a
	// CAT client that may set the frequency). nil: the radio is not told.
	SetFrequency func(physic.Frequency) error
	// Token, if not empty, is the bearer token every write (POST, PUT, DELETE) must carry:
	// Authorization: Bearer <token>. Reads are open.
	Token string
	// Ready says whether the daemon can serve (hardware up, run loop healthy), for /readyz; nil:
	// ready while the service runs.
	Ready func() error
	// Version is the daemon's version, shown in the status.
	Version string
	Logger  *slog.Logger
	// Clock is the service's clock, for the age of the radio's last report; default the wall
	// clock.
	Clock clock.Clock
	// Heartbeat is how often the event stream sends a keep-alive comment when it has nothing
	// else to send, on the wall clock (it is I/O keep-alive, for proxies and clients that close a
	// silent connection); default 15 s (common practice for server-sent events).
	Heartbeat time.Duration
}

func (o *Options) defaults() {
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	if o.Clock == nil {
		o.Clock = clock.Wall{}
	}
	if o.Heartbeat == 0 {
		o.Heartbeat = 15 * time.Second
	}
}

func (o Options) validate() error {
	var errs []error
	if o.Service == nil {
		errs = append(errs, errors.New("no service"))
	}
	if o.Heartbeat < 0 || o.Heartbeat > 10*time.Minute {
		errs = append(errs, fmt.Errorf("heartbeat %v: want 0 (default) to 10 min", o.Heartbeat))
	}
	if strings.TrimSpace(o.Token) != o.Token || strings.ContainsAny(o.Token, " \t\r\n") {
		errs = append(errs, errors.New("token: no white space allowed"))
	}
	return errors.Join(errs...)
}

// Body limits: a JSON request is a handful of fields; a memory map of the map's default bound
// of 512 points is some 40 KiB as CSV and 60 KiB as JSON, and an import may carry a few times
// that (controller.MaxImportPoints).
const (
	maxJSONBody = 64 << 10
	maxMapBody  = 1 << 20
)

// editWait bounds how long a memory map change waits for the operation that runs to end
// (changes are applied between operations): a tune takes seconds, and the HTTP server's write
// timeout is usually 30 s (common practice).
const editWait = 20 * time.Second

// API is the HTTP API: an http.Handler. Build it with New; Close it when the server shuts down.
type API struct {
	o     Options
	s     *controller.Service
	log   *slog.Logger
	mux   *http.ServeMux
	table []route
	token [sha256.Size]byte

	mu      sync.Mutex
	closed  bool
	closing chan struct{}
	streams sync.WaitGroup
}

// route is one endpoint.
type route struct {
	method, path string
	// write: a change of state, which needs the token when one is configured.
	write bool
	h     func(w http.ResponseWriter, r *http.Request) error
}

// New builds the API on o.Service.
func New(o Options) (*API, error) {
	o.defaults()
	if err := o.validate(); err != nil {
		return nil, fmt.Errorf("api: options: %w", err)
	}
	a := &API{o: o, s: o.Service, log: o.Logger.With("component", "api"), mux: http.NewServeMux(),
		closing: make(chan struct{})}
	if o.Token != "" {
		a.token = sha256.Sum256([]byte(o.Token))
	}
	a.table = a.routes()
	methods := map[string][]string{}
	var paths []string
	for _, rt := range a.table {
		a.mux.Handle(rt.method+" "+rt.path, a.wrap(rt))
		if _, ok := methods[rt.path]; !ok {
			paths = append(paths, rt.path)
		}
		methods[rt.path] = append(methods[rt.path], rt.method)
	}
	// The mux answers a wrong method with a plain-text 405; these answer it in JSON, with Allow.
	for _, p := range paths {
		allow := methods[p]
		if slices.Contains(allow, http.MethodGet) {
			allow = append(allow, http.MethodHead)
		}
		a.mux.Handle(p, a.safe(func(w http.ResponseWriter, r *http.Request) {
			w.Header().Set("Allow", strings.Join(allow, ", "))
			writeError(w, &apiError{Status: http.StatusMethodNotAllowed, Message: fmt.Sprintf("method %s not allowed: want %s", r.Method, strings.Join(allow, ", "))})
		}))
	}
	a.mux.Handle("/", a.safe(func(w http.ResponseWriter, r *http.Request) {
		writeError(w, &apiError{Status: http.StatusNotFound, Message: "no such endpoint: see /api/v1/openapi.json"})
	}))
	return a, nil
}

// routes is the route table: every endpoint, as the OpenAPI description must list it.
func (a *API) routes() []route {
	return []route{
		{method: http.MethodGet, path: "/healthz", h: a.healthz},
		{method: http.MethodGet, path: "/readyz", h: a.readyz},
		{method: http.MethodGet, path: "/api/v1/openapi.json", h: a.openapi},
		{method: http.MethodGet, path: "/api/v1/status", h: a.status},
		{method: http.MethodPost, path: "/api/v1/frequency", write: true, h: a.frequency},
		{method: http.MethodPost, path: "/api/v1/tune", write: true, h: a.tune},
		{method: http.MethodPost, path: "/api/v1/stop", write: true, h: a.stop},
		{method: http.MethodPost, path: "/api/v1/home", write: true, h: a.home},
		{method: http.MethodPost, path: "/api/v1/goto", write: true, h: a.gotoStep},
		{method: http.MethodPost, path: "/api/v1/reference", write: true, h: a.reference},
		{method: http.MethodPost, path: "/api/v1/calibrate-backlash", write: true, h: a.calibrate},
		{method: http.MethodPost, path: "/api/v1/reset", write: true, h: a.reset},
		{method: http.MethodGet, path: "/api/v1/requests/{id}", h: a.request},
		{method: http.MethodGet, path: "/api/v1/memory", h: a.memory},
		{method: http.MethodPut, path: "/api/v1/memory", write: true, h: a.importMemory},
		{method: http.MethodDelete, path: "/api/v1/memory/{hz}", write: true, h: a.forgetPoint},
		{method: http.MethodGet, path: "/api/v1/sweeps", h: a.sweeps},
		{method: http.MethodGet, path: "/api/v1/sweeps/{id}", h: a.sweep},
		{method: http.MethodGet, path: "/api/v1/events", h: a.events},
	}
}

// ServeHTTP implements http.Handler.
func (a *API) ServeHTTP(w http.ResponseWriter, r *http.Request) { a.mux.ServeHTTP(w, r) }

// Close ends every event stream and waits for their handlers to return; new streams are
// refused. Call it when the HTTP server shuts down (http.Server.RegisterOnShutdown), since a
// stream never falls idle by itself. Everything else keeps working.
func (a *API) Close() {
	a.mu.Lock()
	if !a.closed {
		a.closed = true
		close(a.closing)
	}
	a.mu.Unlock()
	a.streams.Wait()
}

// wrap gives a route its recovery, its authentication and its error replies.
func (a *API) wrap(rt route) http.Handler {
	return a.safe(func(w http.ResponseWriter, r *http.Request) {
		if rt.write && !a.authorized(r) {
			a.log.Warn("write refused: no token or a wrong one", "method", r.Method, "path", r.URL.Path, "remote", r.RemoteAddr)
			w.Header().Set("WWW-Authenticate", `Bearer realm="tankd"`)
			writeError(w, &apiError{Status: http.StatusUnauthorized, Field: "Authorization", Message: "want Authorization: Bearer <token>"})
			return
		}
		if err := rt.h(w, r); err != nil {
			var ae *apiError
			if !errors.As(err, &ae) {
				a.log.Error("request failed", "method", r.Method, "path", r.URL.Path, "err", err)
				ae = &apiError{Status: http.StatusInternalServerError, Message: err.Error()}
			}
			writeError(w, ae)
		}
	})
}

// authorized compares the bearer token in constant time: both sides are hashed first, so that
// not even the token's length shows in the time taken.
func (a *API) authorized(r *http.Request) bool {
	if a.o.Token == "" {
		return true
	}
	scheme, tok, ok := strings.Cut(r.Header.Get("Authorization"), " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") {
		return false
	}
	got := sha256.Sum256([]byte(strings.TrimSpace(tok)))
	return subtle.ConstantTimeCompare(got[:], a.token[:]) == 1
}

// safe recovers a panic in h: it is logged with its stack and, if nothing has been sent yet,
// answered with a 500. The server goes on.
func (a *API) safe(h http.HandlerFunc) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		rw := &recorder{ResponseWriter: w}
		defer func() {
			p := recover()
			if p == nil {
				return
			}
			a.log.Error("panic in an HTTP handler", "method", r.Method, "path", r.URL.Path, "panic", p, "stack", string(debug.Stack()))
			if !rw.wrote {
				writeError(rw, &apiError{Status: http.StatusInternalServerError, Message: "internal error"})
			}
		}()
		h(rw, r)
	})
}

// recorder notes whether a response has started. http.ResponseController reaches the
// server's own writer through Unwrap (flushing, write deadlines).
type recorder struct {
	http.ResponseWriter
	wrote bool
}

func (rw *recorder) WriteHeader(code int) {
	rw.wrote = true
	rw.ResponseWriter.WriteHeader(code)
}

func (rw *recorder) Write(b []byte) (int, error) {
	rw.wrote = true
	return rw.ResponseWriter.Write(b)
}

func (rw *recorder) Unwrap() http.ResponseWriter { return rw.ResponseWriter }

// writeJSON sends v as JSON with the status code.
func writeJSON(w http.ResponseWriter, code int, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		code = http.StatusInternalServerError
		b, _ = json.Marshal(&apiError{Message: "api: encode the response: " + err.Error()})
	}
	h := w.Header()
	h.Set("Content-Type", "application/json")
	h.Set("Cache-Control", "no-store")
	w.WriteHeader(code)
	_, _ = w.Write(append(b, '\n'))
}

func writeError(w http.ResponseWriter, e *apiError) { writeJSON(w, e.Status, e) }

// readBody reads the request's body up to limit bytes: more is a 413.
func readBody(w http.ResponseWriter, r *http.Request, limit int64) ([]byte, error) {
	b, err := io.ReadAll(http.MaxBytesReader(w, r.Body, limit))
	var tooBig *http.MaxBytesError
	switch {
	case errors.As(err, &tooBig):
		return nil, &apiError{Status: http.StatusRequestEntityTooLarge, Field: "body", Message: fmt.Sprintf("body over %d bytes", limit)}
	case err != nil:
		return nil, badRequest("body", "could not read the body: %v", err)
	}
	return b, nil
}

// mediaType is the request's Content-Type without its parameters, lower case; "" if none.
func mediaType(r *http.Request) (string, error) {
	ct := r.Header.Get("Content-Type")
	if ct == "" {
		return "", nil
	}
	mt, _, err := mime.ParseMediaType(ct)
	if err != nil {
		return "", &apiError{Status: http.StatusUnsupportedMediaType, Field: "Content-Type", Message: fmt.Sprintf("%q: %v", clipString(ct), err)}
	}
	return mt, nil
}

// jsonBody reads a JSON request body (at most maxJSONBody): with a Content-Type, it must be
// application/json. (The types a browser may send to another site without asking first —
// form-urlencoded, multipart, text/plain — are all refused, so a web page cannot post to the
// API behind the operator's back.)
func jsonBody(w http.ResponseWriter, r *http.Request) ([]byte, error) {
	b, err := readBody(w, r, maxJSONBody)
	if err != nil {
		return nil, err
	}
	mt, err := mediaType(r)
	if err != nil {
		return nil, err
	}
	if mt != "" && mt != "application/json" && len(strings.TrimSpace(string(b))) > 0 {
		return nil, &apiError{Status: http.StatusUnsupportedMediaType, Field: "Content-Type", Message: fmt.Sprintf("%s: want application/json", mt)}
	}
	return b, nil
}

// OpenAPI is the OpenAPI 3 description of the API, as served at /api/v1/openapi.json.
func OpenAPI() []byte { return slices.Clone(openapiJSON) }

//go:embed openapi.json
var openapiJSON []byte

func (a *API) openapi(w http.ResponseWriter, r *http.Request) error {
	w.Header().Set("Content-Type", "application/json")
	_, _ = w.Write(openapiJSON)
	return nil
}

func (a *API) healthz(w http.ResponseWriter, r *http.Request) error {
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	_, _ = io.WriteString(w, "ok\n")
	return nil
}

func (a *API) readyz(w http.ResponseWriter, r *http.Request) error {
	w.Header().Set("Content-Type", "text/plain; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	err := error(nil)
	if a.s.Snapshot().Stopped {
		err = errors.New("the service has stopped")
	} else if a.o.Ready != nil {
		err = a.o.Ready()
	}
	if err != nil {
		w.WriteHeader(http.StatusServiceUnavailable)
		_, _ = io.WriteString(w, "not ready: "+err.Error()+"\n")
		return nil
	}
	_, _ = io.WriteString(w, "ready\n")
	return nil
}
