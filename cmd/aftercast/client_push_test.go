package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store/storetest"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// Strict CSV through the CLI and the real service. A push that a broken
// line ends midway, after some of its messages were committed, says how
// many rows the server committed and that pushing the whole file again is
// safe; and it is: once the line is fixed, a second push stores the rest
// and counts the committed rows as duplicates (both push commands). Rows
// bad on their own are refused with their line before sending.
func TestStrictPush(t *testing.T) {
	t.Parallel()
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "-", DatabaseURL: storetest.URL(t)})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	addr := "--addr=" + srv.GRPCAddr()
	cli := func(args ...string) (code int, stdout, stderr string) {
		var out, errb bytes.Buffer
		code = run(args, &out, &errb)
		return code, out.String(), errb.String()
	}
	// Two series, so that the forecasts are not late for the actuals.
	for _, key := range []string{"strict/h", "strict/f"} {
		if code, out, errs := cli("series", "create", addr, "--step", "1h", "--horizon", "24", key); code != 0 {
			t.Fatal(out, errs)
		}
	}
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	hour := func(h int) string { return t0.Add(time.Duration(h) * time.Hour).Format(time.RFC3339) }
	const broken = `strict/h,2026-06-01T00:00:00Z,8"` // a bare quote: the reading cannot go on

	t.Run("actuals", func(t *testing.T) {
		t.Parallel()
		// Lines 2-8: seven actuals, line 5 refused on its own (hexadecimal);
		// line 9 broken; lines 10-11 two more actuals.
		lines := []string{"series,time,value"}
		for h := range 7 {
			v := fmt.Sprint(h)
			if h == 3 {
				v = "0x1p3"
			}
			lines = append(lines, "strict/h,"+hour(h)+","+v)
		}
		lines = append(lines, broken, "strict/h,"+hour(7)+",7", "strict/h,"+hour(8)+",8")
		file := writeTemp(t, strings.Join(lines, "\n")+"\n")

		code, out, errs := cli("push", "actuals", addr, "--batch", "4", file)
		if code != 1 {
			t.Errorf("exit %d, want 1", code)
		}
		for _, want := range []string{
			"read 7 rows of " + file + ": sent 6 actuals\naccepted 6, duplicate 0, revised 0, rejected 1\n",
			`line 5: column value: "0x1p3" is not a plain decimal number (hexadecimal is refused)`,
		} {
			if !strings.Contains(out, want) {
				t.Errorf("stdout lacks %q:\n%s", want, out)
			}
		}
		// Four actuals went in the first message, the other two in a
		// second sent when the reading stopped.
		if want := "aftercast push: " + file + `:9: bare " in a field that is not quoted` + "\n" +
			"The push stopped there. The server committed the 6 actuals sent before it, in 2 messages " +
			"(accepted 6, duplicate 0, revised 0, rejected 0); nothing else was sent. " +
			"Pushing the whole file again once it is fixed is safe: the rows already stored count as duplicates.\n"; errs != want {
			t.Errorf("stderr\n%s\nwant\n%s", errs, want)
		}

		lines[4], lines[8] = "strict/h,"+hour(3)+",3", "strict/h,"+hour(9)+",9"
		if err := os.WriteFile(file, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		code, out, errs = cli("push", "actuals", addr, "--batch", "4", file)
		if want := "sent 10 actuals\naccepted 4, duplicate 6, revised 0, rejected 0\n"; code != 0 || !strings.Contains(out, want) {
			t.Errorf("the whole file again: exit %d, stdout\n%s%s\nwant %q", code, out, errs, want)
		}
	})

	t.Run("forecasts", func(t *testing.T) {
		t.Parallel()
		// One point per origin, so that every row opens a vector: the
		// first vectors are sent once more than push.DefaultMaxOpen are
		// open, and the rest are still open when line n+2 breaks.
		n := 10_050
		lines := []string{"series,origin_time,target_time,forecast"}
		for h := range n {
			lines = append(lines, "strict/f,"+hour(h)+","+hour(h+1)+",1")
		}
		lines = append(lines, broken, "strict/f,"+hour(n)+","+hour(n+1)+",1")
		file := writeTemp(t, strings.Join(lines, "\n")+"\n")

		code, out, errs := cli("push", "forecasts", addr, "--model", "m", "--batch", "20", file)
		if code != 1 {
			t.Errorf("exit %d, want 1", code)
		}
		// Reading row 10 002 (line 10 003) opens the 10 001st vector and
		// sends the oldest; the 48 rows after it send 48 more.
		sent := n - 10_000
		if want := fmt.Sprintf("read %d rows of %s: sent %d points in %d vectors for model m\naccepted %d, duplicate 0, late 0, rejected 0\n",
			n, file, sent, sent, sent); out != want {
			t.Errorf("stdout\n%s\nwant\n%s", out, want)
		}
		if want := fmt.Sprintf("aftercast push: %s:%d: bare \" in a field that is not quoted\n"+
			"The push stopped there. The server committed the %d points in %d vectors sent before it, in 3 messages "+
			"(accepted %d, duplicate 0, late 0, rejected 0); nothing else was sent. "+
			"Pushing the whole file again once it is fixed is safe: the rows already stored count as duplicates.\n",
			file, n+2, sent, sent, sent); errs != want {
			t.Errorf("stderr\n%s\nwant\n%s", errs, want)
		}

		lines[n+1] = "strict/f," + hour(n+1) + "," + hour(n+2) + ",1"
		if err := os.WriteFile(file, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
			t.Fatal(err)
		}
		code, out, errs = cli("push", "forecasts", addr, "--model", "m", file)
		if want := fmt.Sprintf("accepted %d, duplicate %d, late 0, rejected 0\n", n+2-sent, sent); code != 0 || !strings.Contains(out, want) {
			t.Errorf("the whole file again: exit %d, stdout\n%s%s\nwant %q", code, out, errs, want)
		}
	})

	t.Run("refused rows", func(t *testing.T) {
		t.Parallel()
		// The cases of issue 10, through the CLI and the service: each
		// row is refused with its line before sending, the others stored.
		file := writeTemp(t, "series,time,value,note\n"+
			"strict/h,"+hour(30)+",1,5,x\n"+ // 2: a field more
			"strict/h,"+hour(31)+",0x1p3,x\n"+ // 3
			"strict/h,"+hour(32)+",1_000,x\n"+ // 4
			"strict/h,"+hour(33)+",1e-400,x\n"+ // 5
			"strict/h,"+hour(34)+",1e400,x\n"+ // 6
			"strict/h\xff,"+hour(35)+",1,x\n"+ // 7: not UTF-8
			"strict/h,"+hour(36)+",1e-320,caf\xc3\n"+ // 8: not UTF-8 in an ignored column
			"strict/h,"+hour(37)+",1e-320,x\n") // 9: stored
		code, out, errs := cli("push", "actuals", addr, file)
		if code != 1 || errs != "aftercast push: 7 of 8 rows rejected\n" {
			t.Errorf("exit %d, stderr %q; want 1 and 7 of 8 rows rejected", code, errs)
		}
		for _, want := range []string{
			"sent 1 actuals\naccepted 1, duplicate 0, revised 0, rejected 7\n",
			"line 2: row has 5 fields, the header has 4 (quote a field that contains a comma)\n",
			`line 3: column value: "0x1p3" is not a plain decimal number (hexadecimal is refused)` + "\n",
			`line 4: column value: "1_000" is not a plain decimal number ("_" between digits is refused)` + "\n",
			`line 5: column value: "1e-400" underflows float64: it is not zero but rounds to 0 (the smallest non-zero float64 is 4.9e-324)` + "\n",
			`line 6: column value: "1e400" overflows float64 (its magnitude is above 1.8e308)` + "\n",
			`line 7: column series: "strict/h\xff" is not valid UTF-8 (byte 0xff at offset 8; the file must be UTF-8)` + "\n",
			`line 8: column note: "caf\xc3" is not valid UTF-8 (byte 0xc3 at offset 3; the file must be UTF-8)` + "\n",
		} {
			if !strings.Contains(out, want) {
				t.Errorf("stdout lacks %q:\n%s", want, out)
			}
		}
	})

	t.Run("nothing sent", func(t *testing.T) {
		t.Parallel()
		file := writeTemp(t, "series,time,value\n"+broken+"\nstrict/h,"+hour(20)+",1\n")
		code, out, errs := cli("push", "actuals", addr, file)
		if want := "aftercast push: " + file + `:2: bare " in a field that is not quoted` + "\n" +
			"The push stopped there, before sending anything: the server stored nothing of this file.\n"; code != 1 || out != "" || errs != want {
			t.Errorf("exit %d, stdout %q, stderr\n%s\nwant\n%s", code, out, errs, want)
		}
	})

	t.Run("model not UTF-8", func(t *testing.T) {
		t.Parallel()
		file := writeTemp(t, "series,origin_time,target_time,forecast\nstrict/h,"+hour(0)+","+hour(1)+",1\n")
		code, _, errs := cli("push", "forecasts", addr, "--model", "m\xe9", file)
		if want := `aftercast push: --model "m\xe9": not valid UTF-8` + "\n"; code != 1 || errs != want {
			t.Errorf("exit %d, stderr %q, want %q", code, errs, want)
		}
	})
}

// unconfirmingActuals takes every message of a stream and then fails it,
// as a server that lost its database before answering would.
type unconfirmingActuals struct {
	aftercastv1.UnimplementedActualServiceServer
}

func (unconfirmingActuals) StreamActuals(s grpc.ClientStreamingServer[aftercastv1.StreamActualsRequest, aftercastv1.StreamActualsResponse]) error {
	for {
		if _, err := s.Recv(); errors.Is(err, io.EOF) {
			return status.Error(codes.Internal, "stand-in failure after the last message")
		} else if err != nil {
			return err
		}
	}
}

// When the server does not answer the closed stream, the stop cannot say
// what is committed, and says so.
func TestPushStoppedWithoutConfirmation(t *testing.T) {
	t.Parallel()
	s := grpc.NewServer()
	aftercastv1.RegisterActualServiceServer(s, unconfirmingActuals{})
	addr := serveGRPC(t, s)
	file := writeTemp(t, "series,time,value\nh,2026-01-01T00:00:00Z,1\nh,2026-01-01T01:00:00Z,2\nh,2026-01-01T02:00:00Z,\"3\n")
	var out, errb bytes.Buffer
	code := run([]string{"push", "actuals", "--addr", addr, file}, &out, &errb)
	want := "aftercast push: " + file + ":4: quoted field is not closed before the end of the file\n" +
		"The push stopped there after sending 1 message (up to 2 actuals), but the server did not confirm them " +
		"(aftercast at " + addr + ": Internal: stand-in failure after the last message): some or all of them may be stored. " +
		"Pushing the whole file again once it is fixed is safe: the rows already stored count as duplicates.\n"
	if code != 1 || out.Len() != 0 || errb.String() != want {
		t.Errorf("exit %d, stdout %q, stderr\n%s\nwant\n%s", code, out.String(), errb.String(), want)
	}
}
