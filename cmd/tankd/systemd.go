package main

import (
	"context"
	"log/slog"
	"time"

	sd "github.com/coreos/go-systemd/v22/daemon"
)

// notifier tells systemd how the daemon is doing (Type=notify): READY once the hardware is up
// and the service runs, WATCHDOG while the run loop is healthy, STOPPING on the way out. Outside
// systemd (no NOTIFY_SOCKET) every call does nothing.
type notifier struct {
	log  *slog.Logger
	send func(state string) (bool, error) // daemon.SdNotify, or a test's
	// watchdog is the interval systemd expects pings within (WatchdogSec); 0: none asked for.
	watchdog func() (time.Duration, error)
}

func newNotifier(log *slog.Logger) *notifier {
	return &notifier{
		log:      log,
		send:     func(s string) (bool, error) { return sd.SdNotify(false, s) },
		watchdog: func() (time.Duration, error) { return sd.SdWatchdogEnabled(false) },
	}
}

func (n *notifier) notify(state string) {
	if _, err := n.send(state); err != nil {
		n.log.Warn("systemd notification failed", "state", state, "err", err)
	}
}

// ready says the daemon is up: the hardware opened, the controller assembled and running.
func (n *notifier) ready() { n.notify(sd.SdNotifyReady) }

// stopping says the daemon is on its way out.
func (n *notifier) stopping() { n.notify(sd.SdNotifyStopping) }

// watch pings systemd's watchdog at half its interval for as long as healthy says the run loop
// is healthy, until ctx ends; an unhealthy loop gets no ping, and systemd restarts the daemon
// when the interval passes. Without a watchdog it returns at once.
func (n *notifier) watch(ctx context.Context, healthy func() error) {
	every, err := n.watchdog()
	if err != nil {
		n.log.Warn("systemd watchdog setting unreadable", "err", err)
		return
	}
	if every <= 0 {
		return
	}
	t := time.NewTicker(every / 2)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-t.C:
			if err := healthy(); err != nil {
				n.log.Error("run loop unhealthy: withholding the watchdog ping", "err", err)
				continue
			}
			n.notify(sd.SdNotifyWatchdog)
		}
	}
}
