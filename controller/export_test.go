package controller

// OnEditQueued has f called each time a map edit has been queued for Run, so that a test can
// tell an edit is waiting for the operation that runs.
func OnEditQueued(s *Service, f func()) {
	s.edits.mu.Lock()
	s.edits.queued = f
	s.edits.mu.Unlock()
}
