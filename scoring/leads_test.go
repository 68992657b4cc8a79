package scoring

import (
	"slices"
	"testing"
)

func TestParseLeads(t *testing.T) {
	t.Parallel()
	cases := []struct {
		in   string
		want []int
		fmt  string
	}{
		{"", nil, ""},
		{"1-4,48", []int{1, 2, 3, 4, 48}, "1-4,48"},
		{"3, 1,2,2", []int{1, 2, 3}, "1-3"},
		{"25-48", nil, "25-48"},
		{"7", []int{7}, "7"},
	}
	for _, c := range cases {
		got, err := ParseLeads(c.in)
		if err != nil {
			t.Errorf("ParseLeads(%q): %v", c.in, err)
			continue
		}
		if c.want != nil && !slices.Equal(got, c.want) {
			t.Errorf("ParseLeads(%q) = %v, want %v", c.in, got, c.want)
		}
		if f := FormatLeads(got); f != c.fmt {
			t.Errorf("FormatLeads(ParseLeads(%q)) = %q, want %q", c.in, f, c.fmt)
		}
	}
	for _, bad := range []string{"0", "-3", "5-2", "a", "1-", "1,,2", "1-200001"} {
		if _, err := ParseLeads(bad); err == nil {
			t.Errorf("ParseLeads(%q): want error", bad)
		}
	}
}
