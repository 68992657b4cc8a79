package server

import (
	"slices"
	"testing"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
)

// Following next-page tokens from the first page visits every item once,
// in order, and ends with an empty token.
func TestOffsetPagesVisitEveryItemOnce(t *testing.T) {
	t.Parallel()
	items := []int{10, 11, 12, 13, 14}
	var got []int
	token, pages := "", 0
	for {
		pg, err := offsetPaging(&aftercastv1.ListDriftStatesRequest{PageSize: 2, PageToken: token})
		if err != nil {
			t.Fatal(err)
		}
		var page []int
		page, token = pageOf(items, pg)
		got, pages = append(got, page...), pages+1
		if token == "" {
			break
		}
		if pages > len(items) {
			t.Fatalf("no end after %d pages", pages)
		}
	}
	if !slices.Equal(got, items) || pages != 3 {
		t.Errorf("visited %v in %d pages, want %v in 3", got, pages, items)
	}
	if page, next := pageOf(items, offsetPage{size: 2, off: 9}); len(page) != 0 || next != "" {
		t.Errorf("past the end: %v %q", page, next)
	}
	for _, req := range []*aftercastv1.ListDriftStatesRequest{{PageToken: "x"}, {PageToken: "-1"}, {PageSize: -1}} {
		if _, err := offsetPaging(req); status.Code(err) != codes.InvalidArgument {
			t.Errorf("%v: %v, want InvalidArgument", req, err)
		}
	}
}
