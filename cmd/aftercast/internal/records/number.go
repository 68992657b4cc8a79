package records

import (
	"errors"
	"math"
	"strconv"
	"strings"
)

// A number in an input file is a plain decimal floating-point literal, a
// strict subset of what strconv.ParseFloat takes:
//
//	number   = [ sign ] mantissa [ exponent ]
//	sign     = "+" | "-"
//	mantissa = digits [ "." [ digits ] ] | "." digits
//	exponent = ( "e" | "E" ) [ sign ] digits
//	digits   = digit { digit }            digit = "0" … "9"
//
// So "5", "-0.25", "007", ".5", "5.", "+1e3" and "2.5E-07" are numbers;
// ".", "1e", "e3", "1.2.3", "0x1p3", "1_000", "1,5", "NaN" and "Inf" are
// not. Surrounding spaces are the caller's (Reader trims them). A literal
// with a non-zero digit whose value rounds to 0 (underflow: magnitude
// below about 2.5e-324) or beyond the largest float64 (overflow: about
// 1.8e308) is refused too; a value that rounds to a non-zero subnormal,
// such as 1e-320, is accepted, and so is any spelling of zero ("0e999").

// The reasons parseDecimal refuses a literal, each read after the quoted
// literal: `"0x1p3" is not a plain decimal number (hexadecimal is refused)`.
var (
	errNotNumber  = errors.New("is not a number")
	errDecimalSep = errors.New(`is not a number (write "." as the decimal separator and no thousands separator)`)
	errHex        = errors.New("is not a plain decimal number (hexadecimal is refused)")
	errSeparator  = errors.New(`is not a plain decimal number ("_" between digits is refused)`)
	errNotFinite  = errors.New("is not a finite number (NaN and Inf are refused)")
	errOverflow   = errors.New("overflows float64 (its magnitude is above 1.8e308)")
	errUnderflow  = errors.New("underflows float64: it is not zero but rounds to 0 (the smallest non-zero float64 is 4.9e-324)")
)

// parseDecimal parses s, which must be a number of the grammar above.
func parseDecimal(s string) (float64, error) {
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	from := i
	for i < len(s) && isDigit(s[i]) {
		i++
	}
	digits := i - from
	if i < len(s) && s[i] == '.' {
		i++
		from = i
		for i < len(s) && isDigit(s[i]) {
			i++
		}
		digits += i - from
	}
	if digits == 0 {
		return 0, refusal(s)
	}
	mantissa := i
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		i++
		if i < len(s) && (s[i] == '+' || s[i] == '-') {
			i++
		}
		from = i
		for i < len(s) && isDigit(s[i]) {
			i++
		}
		if i == from {
			return 0, refusal(s)
		}
	}
	if i != len(s) {
		return 0, refusal(s)
	}
	// The grammar is a subset of ParseFloat's decimal syntax, so the only
	// error left is a range error, which comes with ±Inf.
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		if math.IsInf(v, 0) {
			return 0, errOverflow
		}
		return 0, errNotNumber
	}
	if v == 0 && strings.ContainsAny(s[:mantissa], "123456789") {
		return 0, errUnderflow
	}
	return v, nil
}

func isDigit(c byte) bool { return '0' <= c && c <= '9' }

// refusal says why s, which is not in the grammar, is refused.
func refusal(s string) error {
	body := strings.ToLower(strings.TrimLeft(s, "+-"))
	switch {
	case body == "nan" || body == "inf" || body == "infinity":
		return errNotFinite
	case strings.HasPrefix(body, "0x"):
		return errHex
	case strings.Contains(s, "_"):
		return errSeparator
	case strings.Contains(s, ","):
		return errDecimalSep
	}
	return errNotNumber
}
