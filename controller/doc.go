// Package controller is tankd's service core: Service owns the tuner and the hardware behind it
// on one goroutine, serialises every request that touches the motor, the coupler or the
// transmitter, lets the newest frequency cancel a tune in progress, persists what the tuner
// learns, and publishes snapshots that API handlers and metric collectors read without touching
// any hardware.
//
// The tuning logic itself lives in controller/tune (the synchronous core), motion in
// controller/motion, the memory map in controller/memmap. cmd/tankd builds the resources
// (drivers or the simulator), hands them to NewService and calls Run.
package controller
