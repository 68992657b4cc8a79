package main

import (
	"context"
	"crypto/rand"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/push"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
)

func runPush(args []string, stdout, stderr io.Writer) error {
	return subcommand("push", args, stderr,
		sub{"forecasts", func(args []string) error { return pushForecasts(args, stdout, stderr) }},
		sub{"actuals", func(args []string) error { return pushActuals(args, stdout, stderr) }},
	)
}

func pushForecasts(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("push forecasts", "FILE.csv (columns series,origin_time,target_time,forecast[,issued_at]; - for stdin)", stderr)
	cf := addStreamFlags(fs)
	model := fs.String("model", "", "model or job that issued the forecasts (required)")
	batch := fs.Int("batch", 500, "forecast vectors per stream message (at most the service's limit)")
	file, err := pushArgs(fs, args, batch)
	if err != nil {
		return err
	}
	if *model == "" {
		fmt.Fprintln(stderr, "aftercast push forecasts: --model is required")
		fs.Usage()
		return errUsage
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	info, err := cf.serverInfo(conn)
	if err != nil {
		return err
	}
	sizes := cf.pushBatching(info, fs, *batch, "vectors")
	series := aftercastv1.NewSeriesServiceClient(conn)
	forecasts := aftercastv1.NewForecastServiceClient(conn)
	cache := push.NewSeriesCache(func(key string) (push.SeriesInfo, bool, error) {
		ctx, cancel := cf.call()
		defer cancel()
		resp, err := series.GetSeries(ctx, &aftercastv1.GetSeriesRequest{Key: key})
		switch status.Code(err) {
		case codes.OK:
			info, err := seriesInfo(resp.GetSeries())
			return info, err == nil, err
		case codes.NotFound, codes.InvalidArgument: // a malformed key names no series either
			return push.SeriesInfo{}, false, nil
		}
		return push.SeriesInfo{}, false, err
	})

	var src *push.Forecasts
	ids := newMessageIDs()
	sum, err := retryPush(cf, file, func(in io.Reader, name string) (*aftercastv1.ForecastPushSummary, error) {
		var err error
		if src, err = push.NewForecasts(in, name, *model, cache, push.DefaultMaxOpen); err != nil {
			return nil, err
		}
		prog := newProgress(stderr, "vectors")
		defer prog.done()
		k := 0
		resp, err := pushBatches(forecasts.StreamForecasts, cf.timeout, sizes, src.Next,
			func(fs []*aftercastv1.Forecast) *aftercastv1.StreamForecastsRequest {
				k++
				return &aftercastv1.StreamForecastsRequest{Forecasts: fs, RequestId: ids.of(k)}
			},
			func() { prog.update(src.Rows, src.Vectors) })
		return resp.GetSummary(), err
	})
	stop, stopped := errors.AsType[*pushStop](err)
	if err != nil && (!stopped || !stop.confirmed) {
		if stopped {
			return stop.report(cf, fmt.Sprintf("%s in %s", plural(src.Points, "point"), plural(src.Vectors, "vector")), "")
		}
		return cf.rpcError(err, "")
	}

	rejected := src.Rejected.List
	for _, r := range sum.GetRejections() {
		rejected = append(rejected, src.Lines.Forecast(r))
	}
	fmt.Fprintf(stdout, "read %d rows of %s: sent %d points in %d vectors for model %s\n",
		src.Rows, inputName(file), src.Points, src.Vectors, *model)
	fmt.Fprintf(stdout, "accepted %d, duplicate %d, late %d, rejected %d\n", sum.GetAccepted(),
		sum.GetDuplicate()+src.Duplicates, sum.GetLate(), sum.GetRejected()+src.Rejected.N)
	err = reportRejected(stdout, rejected, src.Rejected.Truncated, sum.GetRejectionsTruncated(),
		sum.GetRejected()+src.Rejected.N, src.Rows)
	if stopped {
		return stop.report(cf, fmt.Sprintf("%s in %s", plural(src.Points, "point"), plural(src.Vectors, "vector")),
			fmt.Sprintf("accepted %d, duplicate %d, late %d, rejected %d",
				sum.GetAccepted(), sum.GetDuplicate(), sum.GetLate(), sum.GetRejected()))
	}
	return err
}

func pushActuals(args []string, stdout, stderr io.Writer) error {
	fs := newFlags("push actuals", "FILE.csv (columns series,time,value; - for stdin)", stderr)
	cf := addStreamFlags(fs)
	batch := fs.Int("batch", 5000, "actuals per stream message (at most the service's limit)")
	file, err := pushArgs(fs, args, batch)
	if err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	info, err := cf.serverInfo(conn)
	if err != nil {
		return err
	}
	sizes := cf.pushBatching(info, fs, *batch, "actuals")
	actuals := aftercastv1.NewActualServiceClient(conn)

	var src *push.Actuals
	ids := newMessageIDs()
	sum, err := retryPush(cf, file, func(in io.Reader, name string) (*aftercastv1.ActualPushSummary, error) {
		var err error
		if src, err = push.NewActuals(in, name); err != nil {
			return nil, err
		}
		prog := newProgress(stderr, "actuals")
		defer prog.done()
		k := 0
		resp, err := pushBatches(actuals.StreamActuals, cf.timeout, sizes, src.Next,
			func(as []*aftercastv1.Actual) *aftercastv1.StreamActualsRequest {
				k++
				return &aftercastv1.StreamActualsRequest{Actuals: as, RequestId: ids.of(k)}
			},
			func() { prog.update(src.Rows, src.Sent) })
		return resp.GetSummary(), err
	})
	stop, stopped := errors.AsType[*pushStop](err)
	if err != nil && (!stopped || !stop.confirmed) {
		if stopped {
			return stop.report(cf, plural(src.Sent, "actual"), "")
		}
		return cf.rpcError(err, "")
	}

	rejected := src.Rejected.List
	for _, r := range sum.GetRejections() {
		rejected = append(rejected, src.Lines.Actual(r))
	}
	fmt.Fprintf(stdout, "read %d rows of %s: sent %d actuals\n", src.Rows, inputName(file), src.Sent)
	fmt.Fprintf(stdout, "accepted %d, duplicate %d, revised %d, rejected %d\n", sum.GetAccepted(),
		sum.GetDuplicate(), sum.GetRevised(), sum.GetRejected()+src.Rejected.N)
	err = reportRejected(stdout, rejected, src.Rejected.Truncated, sum.GetRejectionsTruncated(),
		sum.GetRejected()+src.Rejected.N, src.Rows)
	if stopped {
		return stop.report(cf, plural(src.Sent, "actual"), fmt.Sprintf("accepted %d, duplicate %d, revised %d, rejected %d",
			sum.GetAccepted(), sum.GetDuplicate(), sum.GetRevised(), sum.GetRejected()))
	}
	return err
}

// pushStop is a push that an error of its input (a broken line of the
// file) or of a series lookup ended before the end of the file. What had
// been read before it was sent and the stream closed, so that the server's
// response says what it committed (see pushBatches).
type pushStop struct {
	cause error
	// messages counts the stream messages sent, or being sent when
	// sending failed.
	messages int
	// confirmed is set when the server answered after the stream was
	// closed: everything sent is committed.
	confirmed bool
	// unconfirmed is why the server did not answer, when it did not.
	unconfirmed error
}

func (e *pushStop) Error() string { return e.cause.Error() }

func (e *pushStop) Unwrap() error { return e.cause }

// GRPCStatus is the cause's status, so that a lookup that failed with
// UNAVAILABLE is retried like a broken stream.
func (e *pushStop) GRPCStatus() *status.Status {
	if st, ok := status.FromError(e.cause); ok {
		return st
	}
	return status.New(codes.Unknown, e.cause.Error())
}

// report says why the push stopped and what the server holds of it. sent
// is what was sent ("5000 actuals"); counts, when the server confirmed it,
// what the server made of it ("accepted 4990, duplicate 0, …").
func (e *pushStop) report(cf *clientFlags, sent, counts string) error {
	cause := e.cause
	if _, ok := status.FromError(cause); ok {
		cause = cf.rpcError(cause, "")
	}
	const again = "Pushing the whole file again once it is fixed is safe: the rows already stored count as duplicates."
	messages := plural(int64(e.messages), "message")
	switch {
	case e.confirmed:
		return &stopReport{cause: cause, note: fmt.Sprintf(
			"The push stopped there. The server committed the %s sent before it, in %s (%s); nothing else was sent. %s",
			sent, messages, counts, again)}
	case e.messages == 0 && e.unconfirmed == nil:
		return &stopReport{cause: cause,
			note: "The push stopped there, before sending anything: the server stored nothing of this file."}
	}
	unconfirmed := cf.rpcError(e.unconfirmed, "")
	return &stopReport{cause: cause, unconfirmed: unconfirmed, note: fmt.Sprintf(
		"The push stopped there after sending %s (up to %s), but the server did not confirm them (%s): some or all of them may be stored. %s",
		messages, sent, unconfirmed, again)}
}

// stopReport is the error a stopped push ends with: its cause, then on a
// line of its own a note in sentences for people, saying what the server
// holds of the push.
type stopReport struct {
	cause error
	note  string
	// unconfirmed is why the server did not confirm what was sent, when
	// it did not; the note says it too.
	unconfirmed error
}

func (e *stopReport) Error() string { return e.cause.Error() + "\n" + e.note }

// Unwrap is the cause, then why the server did not confirm, if it did not.
func (e *stopReport) Unwrap() []error {
	if e.unconfirmed == nil {
		return []error{e.cause}
	}
	return []error{e.cause, e.unconfirmed}
}

// plural is "1 actual", "2 actuals".
func plural(n int64, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}

// pushArgs parses the flags of a push command and returns its file.
func pushArgs(fs *flag.FlagSet, args []string, batch *int) (string, error) {
	pos, err := parseExactly(fs, args, 1)
	if err != nil {
		return "", err
	}
	if *batch < 1 {
		return "", fmt.Errorf("--batch %d: want at least 1", *batch)
	}
	return pos[0], nil
}

// reportRejected lists rejected rows by line and fails when there are any.
func reportRejected(w io.Writer, rs []push.Rejection, localTruncated, serverTruncated bool, n, rows int64) error {
	if n == 0 {
		return nil
	}
	push.SortByLine(rs)
	for _, r := range rs {
		fmt.Fprintln(w, r)
	}
	if localTruncated {
		fmt.Fprintf(w, "(only the first %d rows rejected before sending are listed)\n", push.MaxListed)
	}
	if serverTruncated {
		fmt.Fprintln(w, "(only the first rejections of the server are listed)")
	}
	return fmt.Errorf("%d of %d rows rejected", n, rows)
}

// seriesInfo is what reading forecast rows needs of a series.
func seriesInfo(s *aftercastv1.Series) (push.SeriesInfo, error) {
	loc, err := time.LoadLocation(s.GetTimeZone())
	if err != nil {
		return push.SeriesInfo{}, fmt.Errorf("series %s: time zone %q: %w", s.GetKey(), s.GetTimeZone(), err)
	}
	step, err := scoring.ParseStep(s.GetStep(), loc)
	if err != nil {
		return push.SeriesInfo{}, fmt.Errorf("series %s: %w", s.GetKey(), err)
	}
	return push.SeriesInfo{Step: step, Horizon: int(s.GetHorizon())}, nil
}

// Retrying: the server commits a push message by message and answers once
// at the end, so a stream that broke leaves an unknown number of messages
// committed. It is retried whole: the file is read again from its start
// and sent on a new stream, cut into the same messages with the same
// request ids. The server answers a message it had committed with its
// receipt instead of applying it again, so the final summary counts what
// this invocation did, as one unbroken stream would. (Were a receipt gone,
// the re-sent rows would be duplicates: ingestion is idempotent anyway.)

// messageIDs name the messages of one invocation's push: the same across
// its attempts, unique across invocations.
type messageIDs string

func newMessageIDs() messageIDs {
	return messageIDs("aftercast-cli/" + rand.Text())
}

// of is the id of the k-th message.
func (m messageIDs) of(k int) string { return fmt.Sprintf("%s/%d", m, k) }

// retryPush runs attempt on the file, again from its start while it fails
// with UNAVAILABLE, for up to --retry-for (see clientFlags.retry).
func retryPush[S any](cf *clientFlags, file string, attempt func(in io.Reader, name string) (S, error)) (S, error) {
	var sum S
	in, err := openInput(file)
	if err != nil {
		return sum, err
	}
	defer in.close()
	err = cf.retry(context.Background(), "push "+in.name, func() error {
		r, err := in.fromStart()
		if err != nil {
			return err
		}
		sum, err = attempt(r, in.name)
		return err
	})
	return sum, err
}

// input is a pushed file, which every attempt reads from its start.
// Standard input cannot be read again, so it is copied to a temporary
// file as it is read: a retry reads that copy, then the rest of stdin.
type input struct {
	name  string
	f     *os.File // the file, or the copy of stdin
	stdin bool
}

func openInput(file string) (*input, error) {
	if file != "-" {
		f, err := os.Open(file)
		return &input{name: file, f: f}, err
	}
	f, err := os.CreateTemp("", "aftercast-stdin-*.csv")
	if err != nil {
		return nil, fmt.Errorf("a copy of stdin, to read it again on a retry: %w", err)
	}
	return &input{name: inputName(file), f: f, stdin: true}, nil
}

func (in *input) fromStart() (io.Reader, error) {
	if !in.stdin {
		_, err := in.f.Seek(0, io.SeekStart)
		return in.f, err
	}
	// Writes go to the end of the copy; reads of it are by offset.
	copied, err := in.f.Seek(0, io.SeekEnd)
	if err != nil {
		return nil, err
	}
	return io.MultiReader(io.NewSectionReader(in.f, 0, copied), io.TeeReader(os.Stdin, in.f)), nil
}

func (in *input) close() {
	in.f.Close()
	if in.stdin {
		os.Remove(in.f.Name())
	}
}

// inputName names a file argument in messages.
func inputName(file string) string {
	if file == "-" {
		return "stdin"
	}
	return file
}

// batching is how a push cuts a file into stream messages: at most items
// in one message, and about bytes (the items' encoded sizes).
type batching struct{ items, bytes int }

// defaultMessageBytes is the size messages are cut at: large enough that
// framing costs little, well under the server's default limit of 16 MiB.
const defaultMessageBytes = 2 << 20

// itemOverhead is what an item adds to a message beyond its own encoding:
// a field tag and a length, 8 bytes for up to 32 GiB.
const itemOverhead = 8

// serverInfo asks the service for its version and limits; nil from a
// service too old to say, which is then assumed to have the defaults.
func (c *clientFlags) serverInfo(conn *grpc.ClientConn) (*aftercastv1.GetServerInfoResponse, error) {
	ctx, cancel := c.call()
	defer cancel()
	info, err := aftercastv1.NewInfoServiceClient(conn).GetServerInfo(ctx, &aftercastv1.GetServerInfoRequest{})
	if status.Code(err) == codes.Unimplemented {
		return nil, nil
	}
	if err != nil {
		return nil, c.rpcError(err, "")
	}
	return info, nil
}

// messageBytes is the size to cut messages at for a service with info:
// defaultMessageBytes, or less under a smaller limit, keeping room for the
// message's own fields.
func messageBytes(info *aftercastv1.GetServerInfoResponse) int {
	limit := info.GetMaxMessageBytes()
	if limit <= 0 || limit-4096 >= defaultMessageBytes {
		return defaultMessageBytes
	}
	return int(max(limit-4096, limit/2))
}

// pushBatching sizes the messages of a push to the service: --batch items,
// at most the service's max batch. A --batch set above that is lowered
// with a note; the default is lowered silently.
func (c *clientFlags) pushBatching(info *aftercastv1.GetServerInfoResponse, fs *flag.FlagSet, batch int, unit string) batching {
	b := batching{items: batch, bytes: messageBytes(info)}
	if most := int(info.GetMaxBatch()); most > 0 && batch > most {
		b.items = most
		fs.Visit(func(f *flag.Flag) {
			if f.Name == "batch" {
				fmt.Fprintf(c.stderr, "aftercast: --batch %d is above the service's limit of %d %s per message; sending %d\n",
					batch, most, unit, most)
			}
		})
	}
	return b
}

// errStalled cancels a stream that waited on the server for --timeout.
var errStalled = errors.New("stalled")

// streamBatches sends what next returns on one client stream, in messages
// of up to batch items, and returns the server's single response. A
// stream as a whole has no deadline, since a large file (or a slow
// producer piping into stdin) takes as long as it takes; instead it is
// abandoned when opening it, sending one message or waiting for the final
// acknowledgement takes longer than timeout. When next fails the stream is
// abandoned: the server commits nothing of it when it commits only at the
// end (a baseline import).
func streamBatches[Item proto.Message, Req, Resp any](
	open func(context.Context, ...grpc.CallOption) (grpc.ClientStreamingClient[Req, Resp], error),
	timeout time.Duration, b batching, next func() (Item, error), wrap func([]Item) *Req, sent func(),
) (*Resp, error) {
	return sendBatches(open, timeout, b, next, wrap, sent, false)
}

// pushBatches is streamBatches for a push, whose messages the server
// commits one by one. When next fails (a broken line of the file, a failed
// series lookup) it sends what next had returned before, closes the
// stream and waits for the server's response, so that what is committed
// is known rather than cut off at an unknown message: it returns that
// response with a *pushStop.
func pushBatches[Item proto.Message, Req, Resp any](
	open func(context.Context, ...grpc.CallOption) (grpc.ClientStreamingClient[Req, Resp], error),
	timeout time.Duration, b batching, next func() (Item, error), wrap func([]Item) *Req, sent func(),
) (*Resp, error) {
	return sendBatches(open, timeout, b, next, wrap, sent, true)
}

func sendBatches[Item proto.Message, Req, Resp any](
	open func(context.Context, ...grpc.CallOption) (grpc.ClientStreamingClient[Req, Resp], error),
	timeout time.Duration, b batching, next func() (Item, error), wrap func([]Item) *Req, sent func(),
	closeOnStop bool,
) (*Resp, error) {
	ctx, cancel := context.WithCancelCause(context.Background())
	defer cancel(nil)
	s := &batchSender[Item, Req, Resp]{ctx: ctx, timeout: timeout, b: b, wrap: wrap, sent: sent}
	s.watchdog = time.AfterFunc(timeout, func() { cancel(errStalled) })
	defer s.watchdog.Stop()

	stream, err := open(ctx)
	if err = s.waited(err); err != nil {
		return nil, err
	}
	s.stream, s.items = stream, make([]Item, 0, b.items)
	for {
		it, err := next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			if !closeOnStop {
				return nil, err
			}
			return s.stop(err)
		}
		if err := s.add(it); err != nil {
			return nil, err
		}
	}
	if err := s.flush(); err != nil {
		return nil, err
	}
	return s.closeAndRecv()
}

// batchSender is the state of one stream of sendBatches: the items of the
// message being filled, and the watchdog that abandons the stream when a
// wait on the server takes longer than timeout.
type batchSender[Item proto.Message, Req, Resp any] struct {
	ctx      context.Context // cancelled with errStalled by the watchdog
	watchdog *time.Timer
	timeout  time.Duration
	b        batching
	stream   grpc.ClientStreamingClient[Req, Resp]
	wrap     func([]Item) *Req
	sent     func()

	items    []Item // of the next message
	size     int    // of items, with itemOverhead each
	messages int    // sent, or being sent
}

// waited ends a wait on the server, and says why it failed.
func (s *batchSender[Item, Req, Resp]) waited(err error) error {
	s.watchdog.Stop()
	if err != nil && errors.Is(context.Cause(s.ctx), errStalled) {
		return status.Errorf(codes.DeadlineExceeded, "no progress for %v", s.timeout)
	}
	return err
}

// add adds an item to the next message, sending the message first when
// the item would take it over b.bytes, and after when it is then full.
func (s *batchSender[Item, Req, Resp]) add(it Item) error {
	n := proto.Size(it) + itemOverhead
	if len(s.items) > 0 && s.size+n > s.b.bytes {
		if err := s.flush(); err != nil {
			return err
		}
	}
	s.items, s.size = append(s.items, it), s.size+n
	if len(s.items) >= s.b.items {
		return s.flush()
	}
	return nil
}

// flush sends the items added since the last message, if any, as one
// message.
func (s *batchSender[Item, Req, Resp]) flush() error {
	if len(s.items) == 0 {
		return nil
	}
	s.watchdog.Reset(s.timeout)
	s.messages++
	// A message must not change after Send, so every batch gets a new
	// slice.
	err := s.stream.Send(s.wrap(s.items))
	if errors.Is(err, io.EOF) { // the stream ended; its status says why
		if _, err = s.stream.CloseAndRecv(); err == nil {
			err = errors.New("the server ended the stream before all was sent")
		}
	}
	if err = s.waited(err); err != nil {
		return err
	}
	s.sent()
	s.items, s.size = make([]Item, 0, s.b.items), 0
	return nil
}

// closeAndRecv closes the stream and waits for the server's response.
func (s *batchSender[Item, Req, Resp]) closeAndRecv() (*Resp, error) {
	s.watchdog.Reset(s.timeout)
	resp, err := s.stream.CloseAndRecv()
	if err = s.waited(err); err != nil {
		return nil, err
	}
	return resp, nil
}

// stop ends a push at a failure of next, cause (see pushBatches): it
// sends what was added, closes the stream and returns the server's
// response, if it gave one, with a *pushStop.
func (s *batchSender[Item, Req, Resp]) stop(cause error) (*Resp, error) {
	st := &pushStop{cause: cause}
	if s.messages == 0 && len(s.items) == 0 {
		return nil, st
	}
	err := s.flush()
	st.messages = s.messages
	if err != nil {
		st.unconfirmed = err
		return nil, st
	}
	resp, err := s.closeAndRecv()
	if err != nil {
		st.unconfirmed = err
		return nil, st
	}
	st.confirmed = true
	return resp, st
}

// progress prints rows read, items sent and the rate on one line of
// stderr, only when stderr is a terminal.
type progress struct {
	w           io.Writer
	unit        string
	start, last time.Time
	shown       bool
}

func newProgress(stderr io.Writer, unit string) *progress {
	f, ok := stderr.(*os.File)
	if !ok {
		return &progress{}
	}
	if fi, err := f.Stat(); err != nil || fi.Mode()&os.ModeCharDevice == 0 {
		return &progress{}
	}
	return &progress{w: f, unit: unit, start: time.Now()}
}

func (p *progress) update(rows, sent int64) {
	if p.w == nil {
		return
	}
	now := time.Now()
	if now.Sub(p.last) < 200*time.Millisecond {
		return
	}
	p.last, p.shown = now, true
	rate := float64(rows) / now.Sub(p.start).Seconds()
	fmt.Fprintf(p.w, "\r%d rows read, %d %s sent, %.0f rows/s\033[K", rows, sent, p.unit, rate)
}

func (p *progress) done() {
	if p.shown {
		fmt.Fprint(p.w, "\r\033[K")
	}
}
