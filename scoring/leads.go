package scoring

import (
	"fmt"
	"slices"
	"strconv"
	"strings"
)

// maxLeadList bounds what a lead list may expand to, so that "1-999999999"
// typed by mistake is an error rather than a huge allocation.
const maxLeadList = 100_000

// ParseLeads parses a lead list such as "1-24,48": comma-separated leads
// and inclusive ranges, each lead ≥ 1. The result is sorted and free of
// repeats. The empty string is the empty list (meaning "all" to callers).
func ParseLeads(s string) ([]int, error) {
	var out []int
	if strings.TrimSpace(s) == "" {
		return nil, nil
	}
	for part := range strings.SplitSeq(s, ",") {
		part = strings.TrimSpace(part)
		lo, hi, isRange := strings.Cut(part, "-")
		a, err := strconv.Atoi(strings.TrimSpace(lo))
		if err != nil || a < 1 {
			return nil, fmt.Errorf("lead list %q: %q is not a lead (a whole number ≥ 1) or a range such as 1-24", s, part)
		}
		b := a
		if isRange {
			b, err = strconv.Atoi(strings.TrimSpace(hi))
			if err != nil || b < a {
				return nil, fmt.Errorf("lead list %q: %q is not a range from low to high such as 1-24", s, part)
			}
		}
		if b-a+1+len(out) > maxLeadList {
			return nil, fmt.Errorf("lead list %q names more than %d leads", s, maxLeadList)
		}
		for h := a; h <= b; h++ {
			out = append(out, h)
		}
	}
	slices.Sort(out)
	return slices.Compact(out), nil
}

// FormatLeads writes a sorted lead list compactly, ranges joined: the
// inverse of [ParseLeads].
func FormatLeads(leads []int) string {
	var b strings.Builder
	for i := 0; i < len(leads); {
		j := i
		for j+1 < len(leads) && leads[j+1] == leads[j]+1 {
			j++
		}
		if b.Len() > 0 {
			b.WriteByte(',')
		}
		b.WriteString(strconv.Itoa(leads[i]))
		if j > i {
			b.WriteByte('-')
			b.WriteString(strconv.Itoa(leads[j]))
		}
		i = j + 1
	}
	return b.String()
}
