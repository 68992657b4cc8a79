package main

import (
	"cmp"
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
)

// Client commands (series, push, accuracy, pairs) share this file's
// connection flags, dialing and the translation of gRPC statuses into
// messages for people.

const defaultAddr = "127.0.0.1:7410"

// clientFlags are the flags every client command takes.
type clientFlags struct {
	addr    string
	timeout time.Duration
}

func addClientFlags(fs *flag.FlagSet) *clientFlags {
	c := &clientFlags{}
	fs.StringVar(&c.addr, "addr", cmp.Or(os.Getenv("AFTERCAST_ADDR"), defaultAddr),
		"host:port of the aftercast service (env AFTERCAST_ADDR)")
	fs.DurationVar(&c.timeout, "timeout", 30*time.Second,
		"deadline of each request; a push stream fails when one batch or its acknowledgement waits longer")
	return c
}

// dial makes the connection; it connects on the first call. All client
// commands dial here, so that TLS options have one place to go.
func (c *clientFlags) dial() (*grpc.ClientConn, error) {
	if c.timeout <= 0 {
		return nil, fmt.Errorf("--timeout %v: want a positive duration", c.timeout)
	}
	conn, err := grpc.NewClient(c.addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		return nil, fmt.Errorf("--addr %q: %w", c.addr, err)
	}
	return conn, nil
}

// call is the context of one request: it carries the --timeout deadline.
func (c *clientFlags) call() (context.Context, context.CancelFunc) {
	return context.WithTimeout(context.Background(), c.timeout)
}

// rpcError turns a failed call into a message for people. notFound says
// what a NOT_FOUND is about, such as `series "x"`. Errors that are not
// gRPC statuses pass through.
func (c *clientFlags) rpcError(err error, notFound string) error {
	st, ok := status.FromError(err)
	if !ok || err == nil {
		return err
	}
	switch st.Code() {
	case codes.NotFound:
		if notFound == "" {
			return fmt.Errorf("not found: %s", st.Message())
		}
		return fmt.Errorf("%s not found", notFound)
	case codes.InvalidArgument:
		var b strings.Builder
		for _, d := range st.Details() {
			if br, ok := d.(*errdetails.BadRequest); ok {
				for _, v := range br.GetFieldViolations() {
					fmt.Fprintf(&b, "\n  %s: %s", v.GetField(), v.GetDescription())
				}
			}
		}
		if b.Len() == 0 { // no field violations: the message is all there is
			return fmt.Errorf("invalid request: %s", st.Message())
		}
		return fmt.Errorf("invalid request:%s", b.String())
	case codes.Unavailable:
		return fmt.Errorf("cannot reach aftercast at %s: is `aftercast serve` running? (%s)", c.addr, st.Message())
	case codes.DeadlineExceeded:
		return fmt.Errorf("aftercast at %s did not answer within %v (--timeout)", c.addr, c.timeout)
	}
	return fmt.Errorf("aftercast at %s: %s: %s", c.addr, st.Code(), st.Message())
}

// parseArgs parses flags that may come before, between or after the
// positional arguments, which it returns ("push forecasts FILE --model m"
// works as well as "push forecasts --model m FILE").
func parseArgs(fs *flag.FlagSet, args []string) ([]string, error) {
	var pos []string
	for {
		if err := parseFlags(fs, args); err != nil {
			return nil, err
		}
		args = fs.Args()
		if len(args) == 0 {
			return pos, nil
		}
		pos, args = append(pos, args[0]), args[1:]
	}
}

// parseExactly is parseArgs for a command that takes exactly n positional
// arguments; any other number prints the usage.
func parseExactly(fs *flag.FlagSet, args []string, n int) ([]string, error) {
	pos, err := parseArgs(fs, args)
	if err != nil {
		return nil, err
	}
	if len(pos) != n {
		fs.Usage()
		return nil, errUsage
	}
	return pos, nil
}

// sub is one subcommand of a command group such as "series create".
type sub struct {
	name string
	run  func(args []string) error
}

// subcommand runs the subcommand of a group named by args[0].
func subcommand(group string, args []string, stderr io.Writer, subs ...sub) error {
	names := make([]string, len(subs))
	for i, s := range subs {
		if len(args) > 0 && args[0] == s.name {
			return s.run(args[1:])
		}
		names[i] = s.name
	}
	help := len(args) > 0 && (args[0] == "-h" || args[0] == "--help" || args[0] == "help")
	if len(args) > 0 && !help {
		fmt.Fprintf(stderr, "aftercast %s: unknown subcommand %q\n\n", group, args[0])
	}
	fmt.Fprintf(stderr, "usage: aftercast %s %s [flags] ...\n\nRun 'aftercast %s SUBCOMMAND -h' for its flags.\n",
		group, strings.Join(names, "|"), group)
	if help {
		return flag.ErrHelp
	}
	return errUsage
}
