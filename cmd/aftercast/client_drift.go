package main

import (
	"errors"
	"io"
)

var errNotYet = errors.New("not implemented yet")

func runBaseline(args []string, stdout, stderr io.Writer) error { return errNotYet }
func runDrift(args []string, stdout, stderr io.Writer) error    { return errNotYet }
func runEvents(args []string, stdout, stderr io.Writer) error   { return errNotYet }
