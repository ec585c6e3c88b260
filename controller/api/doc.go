// Package api is tankd's HTTP API: an http.Handler that reads the controller.Service's
// snapshots, request statuses and subscriptions, submits requests to it, and never touches the
// hardware. It uses only the standard library's net/http (Go 1.22 method and path patterns).
// openapi.json, served at /api/v1/openapi.json, describes every route; a test keeps the two
// equal.
//
// # Routes
//
//	GET    /healthz                      200 "ok": the process is up
//	GET    /readyz                       200 ready; 503 with the reason (Options.Ready, or the service stopped)
//	GET    /api/v1/openapi.json          200 the OpenAPI 3 description
//	GET    /api/v1/status                200 state, busy, outcome, frequency_hz, position, swr, powers, Q, fault, map_points, link, request_id, queue, notices…
//	POST   /api/v1/frequency   {"hz"}    202 a Follow submitted; 200 nothing needed; 502 the radio refused the frequency
//	POST   /api/v1/tune        [{"hz"}]  202; 422 no frequency known
//	POST   /api/v1/stop                  202, done at once
//	POST   /api/v1/home                  202; 409 no home switch
//	POST   /api/v1/goto        {"step"}  202; 409 position not trusted; 422 outside the soft limits
//	POST   /api/v1/reference   {"step"}  202; 422 outside the soft limits
//	POST   /api/v1/calibrate-backlash [{"hz"}]  202; 422 no frequency known
//	POST   /api/v1/reset                 202
//	GET    /api/v1/requests/{id}[?wait=5s]  200; 404 unknown id
//	GET    /api/v1/memory[?format=csv]   200 JSON points, or the CSV export
//	PUT    /api/v1/memory  (text/csv or application/json)  200; 422 bad points, each named; 503 busy
//	DELETE /api/v1/memory/{hz}           200; 404 no point within 1 Hz
//	GET    /api/v1/sweeps                200 the recordings, newest first (empty without a store)
//	GET    /api/v1/sweeps/{id}           200 text/plain recording; 404
//	GET    /api/v1/events                200 text/event-stream
//
// Every write (POST, PUT, DELETE) needs "Authorization: Bearer <token>" when Options.Token is
// set: 401 otherwise. Every error is JSON, {"error": …, "field": …, "details": […]}: 400 for a
// malformed body, parameter or header (not JSON, an unknown field, a wrong type), 422 for a
// value that cannot be accepted (missing, out of range), 413 for a body over 64 KiB (1 MiB for a
// memory map), 415 for a Content-Type the route does not take, 405 (with Allow) for a wrong
// method, 404 for no such route, 503 once the service has stopped, and 500 for a bug (a panic
// in a handler is recovered and logged with its stack).
//
// # What a request does to the others
//
// Every request that starts work is answered at once with 202, its ID and its state, and
// follows the service's cancellation table (controller.Cancels, controller.Replaces): a request
// that must wait is queued, never refused with 409, and GET /api/v1/requests/{id}?wait=… follows
// it. The answer lists the requests it cancelled and those it replaced.
//
//	arriving ↓   running →          follow, tune, calibrate, goto   home          reference, reset
//	stop                            cancelled                       cancelled     (instant)
//	frequency, tune, calibrate,     cancelled                       waits for it  waits
//	goto
//	home, reference                 cancelled                       waits         waits
//	reset                           waits                           waits         waits (first in the queue)
//
// Among those waiting, a newer frequency request (follow, tune, calibrate) or goto replaces a
// waiting one of that class; a home, reference or reset replaces one of its own kind. A stop
// cancels what runs and clears what waits, whatever it is.
//
// POST /api/v1/frequency is the radio reporting a frequency, decided at once: with a Follower,
// Follower.Settled submits a Follow only if the loop is neither tuned nor being tuned there, and
// its ID is returned with 202 (200 and a null ID when nothing was needed); without one a
// Follow is submitted. If Options.SetFrequency is set the radio's VFO is moved first.
//
// # What the caller must do
//
// Build the API with New on a running (or about to run) Service, serve it with an
// http.Server, and call Close when the server shuts down (http.Server.RegisterOnShutdown):
// event streams never fall idle, so Shutdown alone would wait for them until its deadline.
// Give the server a ReadHeaderTimeout; the API bounds every body itself, lifts the write
// deadline of event streams (each write gets its own), and bounds ?wait and memory edits to
// 20 s, inside a 30 s write timeout.
package api
