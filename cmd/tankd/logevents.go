package main

import (
	"log/slog"

	"github.com/tankd/tankd/controller"
	"github.com/tankd/tankd/controller/tune"
)

// logEvents writes the service's events to the log (readings and moves only at debug level)
// until the subscription is closed.
func logEvents(log *slog.Logger, sub *controller.Subscription) {
	l := log.With("component", "tune")
	for ev := range sub.Events() {
		if ev.Kind != controller.EventTune {
			continue // the service logs its requests itself
		}
		e := ev.Tune
		switch e.Kind {
		case tune.KindReading:
			l.Debug("reading", "stage", e.Stage, "pos", e.Pos, "swr", e.SWR, "forward", e.Forward, "req", ev.Request)
		case tune.KindState:
			l.Info("state", "to", e.State, "freq", e.Freq, "req", ev.Request)
		case tune.KindPrediction:
			l.Info("prediction", "source", e.Prediction.Source, "pos", e.Prediction.Pos, "sigma", e.Prediction.Sigma, "req", ev.Request)
		case tune.KindFit:
			l.Info("fit", "method", e.Fit.Method, "centre", e.Fit.Centre, "q_loaded", e.Fit.QLoaded, "bandwidth_hz", e.Fit.Bandwidth, "min_swr", e.Fit.MinSWR, "req", ev.Request)
		case tune.KindResult:
			r := e.Result
			l.Info("done", "outcome", r.Outcome, "freq", r.Freq, "pos", r.Pos, "swr", r.SWR, "took", r.Duration(), "rf", r.RFTime, "req", ev.Request)
		case tune.KindMove:
			l.Debug("move", "stage", e.Stage, "from", e.Pos, "to", e.Target, "req", ev.Request)
		default:
			l.Info(string(e.Kind), "text", e.Text, "pos", e.Pos, "req", ev.Request)
		}
	}
	if n := sub.Dropped(); n > 0 {
		l.Warn("events not logged: the log fell behind", "dropped", n)
	}
}
