package scoring

import (
	"encoding/csv"
	"errors"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"
)

// Published table values, rounded as printed: the Student t critical values
// from the NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.2
// "Critical Values of the Student's t Distribution" (the same figures as
// Fisher & Yates and every textbook t table), and Φ⁻¹(0.975) = 1.959964 to
// six decimals (standard normal tables; the handbook's ν = ∞ row prints
// 1.960).
func TestQuantilesAgainstTables(t *testing.T) {
	t.Parallel()
	cases := []struct {
		name     string
		got      float64
		want     float64
		decimals int
	}{
		{"t(0.975, 10)", studentTQuantile(10, 0.975), 2.228, 3},
		{"t(0.995, 5)", studentTQuantile(5, 0.995), 4.032, 3},
		{"t(0.975, 30)", studentTQuantile(30, 0.975), 2.042, 3},
		{"t(0.99, 20)", studentTQuantile(20, 0.99), 2.528, 3},
		{"t(0.95, 100)", studentTQuantile(100, 0.95), 1.660, 3},
		{"t(0.025, 10) = −t(0.975, 10)", studentTQuantile(10, 0.025), -2.228, 3},
		{"Φ⁻¹(0.975)", normalQuantile(0.975), 1.959964, 6},
		{"Φ⁻¹(0.995)", normalQuantile(0.995), 2.576, 3},
	}
	for _, c := range cases {
		if tol := 0.5 * math.Pow(10, -float64(c.decimals)); math.Abs(c.got-c.want) > tol {
			t.Errorf("%s = %.9f, table %.*f", c.name, c.got, c.decimals, c.want)
		}
	}
}

// The reference values of testdata/quantiles/quantiles.csv come from R's
// qt, qgamma and qnorm (testdata/quantiles/make_quantiles.R).
func TestQuantilesAgainstR(t *testing.T) {
	t.Parallel()
	f, err := os.Open("../testdata/quantiles/quantiles.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	header, err := r.Read()
	if err != nil || strings.Join(header, ",") != "fn,p,a,b,value" {
		t.Fatalf("header %v, %v", header, err)
	}
	num := func(s string) float64 {
		if s == "NA" {
			return math.NaN()
		}
		x, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatal(err)
		}
		return x
	}
	seen := map[string]int{}
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		p, a, b, want := num(rec[1]), num(rec[2]), num(rec[3]), num(rec[4])
		var got float64
		switch rec[0] {
		case "qt":
			got = studentTQuantile(a, p)
		case "qgamma":
			got = gammaQuantile(a, b, p)
		case "qnorm":
			got = normalQuantile(p)
		default:
			t.Fatalf("unknown function %q", rec[0])
		}
		seen[rec[0]]++
		if !relClose(got, want, 1e-9) {
			t.Errorf("%s(p=%v, %v, %v) = %.17g, R %.17g (rel. diff %.2g)", rec[0], p, a, b, got, want, math.Abs(got-want)/math.Abs(want))
		}
	}
	if seen["qt"] < 8 || seen["qgamma"] < 8 || seen["qnorm"] < 1 {
		t.Errorf("too few reference cases: %v", seen)
	}
}

func TestQuantilesOutsideDomain(t *testing.T) {
	t.Parallel()
	for name, v := range map[string]float64{
		"t p=0":          studentTQuantile(10, 0),
		"t p=1":          studentTQuantile(10, 1),
		"t nu=0":         studentTQuantile(0, 0.5),
		"normal p=1.5":   normalQuantile(1.5),
		"gamma shape=0":  gammaQuantile(0, 1, 0.5),
		"gamma rate=Inf": gammaQuantile(1, math.Inf(1), 0.5),
		"gamma p=NaN":    gammaQuantile(1, 1, math.NaN()),
	} {
		if !math.IsNaN(v) {
			t.Errorf("%s = %v, want NaN", name, v)
		}
	}
	// t density at 0: 1/π for ν = 1 (Cauchy), → φ(0) as ν → ∞.
	if d := studentTDensity0(1); !relClose(d, 1/math.Pi, 1e-14) {
		t.Errorf("t_1 density at 0 = %v, want 1/π", d)
	}
	if d := studentTDensity0(1e8); !relClose(d, 1/math.Sqrt(2*math.Pi), 1e-7) {
		t.Errorf("t_1e8 density at 0 = %v, want φ(0)", d)
	}
}
