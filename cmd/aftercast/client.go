package main

import (
	"cmp"
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path"
	"strings"
	"time"
	"unicode/utf8"

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
	addr     string
	timeout  time.Duration
	retryFor time.Duration
	// stderr takes the notes on retries.
	stderr io.Writer
}

// addClientFlags adds the flags of a command that makes requests.
func addClientFlags(fs *flag.FlagSet) *clientFlags {
	return addFlags(fs, "deadline of each request (each attempt, when one is retried)")
}

// addStreamFlags adds the flags of a command that streams a file (push,
// baseline import), whose --timeout bounds each step of the stream.
func addStreamFlags(fs *flag.FlagSet) *clientFlags {
	return addFlags(fs, "deadline of each step of a stream: opening it, sending one batch, waiting for the final "+
		"acknowledgement (the stream as a whole has none)")
}

func addFlags(fs *flag.FlagSet, timeoutHelp string) *clientFlags {
	c := &clientFlags{stderr: fs.Output()}
	fs.StringVar(&c.addr, "addr", cmp.Or(os.Getenv("AFTERCAST_ADDR"), defaultAddr),
		"host:port of the aftercast service (env AFTERCAST_ADDR)")
	fs.DurationVar(&c.timeout, "timeout", 30*time.Second, timeoutHelp)
	fs.DurationVar(&c.retryFor, "retry-for", 2*time.Minute,
		"keep retrying what fails with UNAVAILABLE (service restarting, database down) for this long, with growing waits; 0: never")
	return c
}

// dial makes the connection; it connects on the first call. All client
// commands dial here, so that TLS options have one place to go. Unary
// requests, which are all idempotent, are retried here (see retry).
func (c *clientFlags) dial() (*grpc.ClientConn, error) {
	if c.timeout <= 0 {
		return nil, fmt.Errorf("--timeout %v: want a positive duration", c.timeout)
	}
	if c.retryFor < 0 {
		return nil, fmt.Errorf("--retry-for %v: want 0 or a positive duration", c.retryFor)
	}
	conn, err := grpc.NewClient(c.addr, grpc.WithTransportCredentials(insecure.NewCredentials()),
		grpc.WithChainUnaryInterceptor(c.retryUnary))
	if err != nil {
		return nil, fmt.Errorf("--addr %q: %w", c.addr, err)
	}
	return conn, nil
}

// call is the context of one request, retries included: --timeout for
// each attempt (set by retryUnary) within --timeout plus --retry-for.
func (c *clientFlags) call() (context.Context, context.CancelFunc) {
	return c.within(context.Background())
}

// within bounds a request made under parent as call does.
func (c *clientFlags) within(parent context.Context) (context.Context, context.CancelFunc) {
	return context.WithTimeout(parent, c.timeout+c.retryFor)
}

// retryUnary gives each attempt of a unary request its --timeout and
// retries it while it fails with UNAVAILABLE.
func (c *clientFlags) retryUnary(ctx context.Context, method string, req, reply any, cc *grpc.ClientConn,
	invoker grpc.UnaryInvoker, opts ...grpc.CallOption) error {
	return c.retry(ctx, path.Base(method), func() error {
		actx, cancel := context.WithTimeout(ctx, c.timeout)
		defer cancel()
		return invoker(actx, method, req, reply, cc, opts...)
	})
}

// Waits between attempts start at firstWait and double up to maxWait.
const (
	firstWait = 500 * time.Millisecond
	maxWait   = 15 * time.Second
)

// retry runs attempt until it succeeds, fails with another code than
// UNAVAILABLE, or the next wait would end more than --retry-for after the
// first failure. UNAVAILABLE is how gRPC reports a connection that could
// not be made or broke, and how the service reports a database it cannot
// reach; what is retried is safe to repeat (every request of the API is
// idempotent; a push is, message by message, see retryPush).
func (c *clientFlags) retry(ctx context.Context, what string, attempt func() error) error {
	var giveUp time.Time
	wait := firstWait
	for {
		err := attempt()
		if status.Code(err) != codes.Unavailable {
			return err
		}
		now := time.Now()
		if giveUp.IsZero() {
			giveUp = now.Add(c.retryFor)
		}
		if now.Add(wait).After(giveUp) {
			return err
		}
		if c.stderr != nil {
			fmt.Fprintf(c.stderr, "aftercast: %s: %s; retrying in %v (--retry-for %v, until %s)\n",
				what, status.Convert(err).Message(), wait, c.retryFor, giveUp.Format(time.TimeOnly))
		}
		select {
		case <-time.After(wait):
		case <-ctx.Done():
			return err
		}
		wait = min(2*wait, maxWait)
	}
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
			return pos, textFlags(fs)
		}
		pos, args = append(pos, args[0]), args[1:]
	}
}

// fileFlags name the flags that hold file paths, which need not be text.
var fileFlags = map[string]bool{"history": true}

// textFlags refuses a flag value that is not UTF-8: keys, models and the
// like are sent as protobuf strings, which must be UTF-8, and a request
// that cannot be encoded would fail with a bare INTERNAL.
func textFlags(fs *flag.FlagSet) error {
	var err error
	fs.Visit(func(f *flag.Flag) {
		if v := f.Value.String(); err == nil && !fileFlags[f.Name] && !utf8.ValidString(v) {
			err = fmt.Errorf("--%s %q: not valid UTF-8", f.Name, v)
		}
	})
	return err
}

// textArg refuses a positional argument (a series key) that is not UTF-8.
func textArg(name, v string) error {
	if !utf8.ValidString(v) {
		return fmt.Errorf("%s %q: not valid UTF-8", name, v)
	}
	return nil
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
