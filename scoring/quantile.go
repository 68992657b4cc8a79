package scoring

import (
	"math"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// The quantile functions the band construction of method.md §4 needs. They
// wrap gonum's distuv (Cephes-derived incomplete beta and gamma inverses) so
// that the rest of the package never panics on a level outside (0, 1): such
// a level gives NaN, as do non-positive parameters. quantile_test.go checks
// them against published tables and against R's qt, qgamma and qnorm.

// studentTQuantile is t_ν⁻¹(p), the p-quantile of Student's t with ν
// degrees of freedom (ν need not be whole).
func studentTQuantile(nu, p float64) float64 {
	if !(p > 0 && p < 1) || !(nu > 0) {
		return math.NaN()
	}
	pp := math.Max(p, 1-p)
	if pp >= 0.75 {
		return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(p)
	}
	// Near the median, distuv solves for y = ν/(ν+t²) close to 1 and loses
	// t to the cancellation in 1−y (relative error 1e-7 at p = ½+1e-7).
	// Solve for x = 1−y = t²/(ν+t²) directly instead: P(|T| ≤ t) = 2pp−1
	// = I_x(½, ν/2).
	x := mathext.InvRegIncBeta(0.5, nu/2, 2*pp-1)
	t := math.Sqrt(nu * x / (1 - x))
	if p < 0.5 {
		t = -t
	}
	return t
}

// normalQuantile is Φ⁻¹(p).
func normalQuantile(p float64) float64 {
	if !(p > 0 && p < 1) {
		return math.NaN()
	}
	return distuv.UnitNormal.Quantile(p)
}

// gammaQuantile is the p-quantile of the Gamma distribution with the given
// shape and rate (mean shape/rate, variance shape/rate²).
func gammaQuantile(shape, rate, p float64) float64 {
	if !(p > 0 && p < 1) || !(shape > 0) || !(rate > 0) || math.IsInf(shape, 0) || math.IsInf(rate, 0) {
		return math.NaN()
	}
	return distuv.Gamma{Alpha: shape, Beta: rate}.Quantile(p)
}

// studentTDensity0 is the density of Student's t with ν degrees of freedom
// at 0, Γ((ν+1)/2) / (√(νπ) Γ(ν/2)).
func studentTDensity0(nu float64) float64 {
	a, _ := math.Lgamma((nu + 1) / 2)
	b, _ := math.Lgamma(nu / 2)
	return math.Exp(a-b) / math.Sqrt(nu*math.Pi)
}
