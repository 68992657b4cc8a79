package main

import (
	"errors"
	"io"
)

var errNotYet = errors.New("not implemented yet")

func runSeries(args []string, stdout, stderr io.Writer) error   { return errNotYet }
func runPush(args []string, stdout, stderr io.Writer) error     { return errNotYet }
func runAccuracy(args []string, stdout, stderr io.Writer) error { return errNotYet }
func runPairs(args []string, stdout, stderr io.Writer) error    { return errNotYet }
