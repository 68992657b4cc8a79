package drift

import "time"

// SetStartHook makes e move every replay start it computes with f: tests
// use it to show that a wrongly computed start is caught.
func SetStartHook(e *Evaluator, f func(time.Time) time.Time) { e.startHook = f }
