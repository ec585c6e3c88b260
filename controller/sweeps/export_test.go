package sweeps

import "github.com/tankd/tankd/controller"

// SetHooks installs functions Run calls on its goroutine: onEvent with every event before it is
// consumed, onWrite with every recording written. Call it before Run.
func SetHooks(s *Store, onEvent func(controller.Event), onWrite func(Info)) {
	s.onEvent, s.onWrite = onEvent, onWrite
}
