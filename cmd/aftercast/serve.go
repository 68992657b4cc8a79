package main

import "io"

func runServe(args []string, stdout, stderr io.Writer) error   { return errNotYet }
func runMigrate(args []string, stdout, stderr io.Writer) error { return errNotYet }
