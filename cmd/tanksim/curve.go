package main

import (
	"errors"
	"io"
)

func runCurve(args []string, stdout, stderr io.Writer) error {
	return errors.New("not built yet")
}
