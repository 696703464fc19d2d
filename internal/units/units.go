// Package units parses and prints the lengths that people type on the
// command line: millimetres, centimetres or metres, with metres
// inside. "2mm", "2 mm", "0.2cm", "0.002m" and "0.002" all mean 2 mm; a
// bare number is metres, the package's internal unit.
package units

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// ParseLength parses a length with an optional unit suffix: "mm", "cm"
// or "m" (lower case; a space before the unit is allowed); a bare
// number is metres. It refuses empty input, unknown units, hexadecimal
// or special spellings ("0x1p3", "Inf", "NaN") and values that are not
// finite. Conversions divide by 1000 or 100, so an exactly written
// number of millimetres gives the correctly rounded metres ("3mm" is
// the float64 nearest 0.003).
func ParseLength(s string) (float64, error) {
	t := strings.TrimSpace(s)
	num, div := t, 1.0
	switch {
	case strings.HasSuffix(t, "mm"):
		num, div = t[:len(t)-2], 1000
	case strings.HasSuffix(t, "cm"):
		num, div = t[:len(t)-2], 100
	case strings.HasSuffix(t, "m"):
		num = t[:len(t)-1]
	}
	num = strings.TrimSpace(num)
	if num == "" {
		return 0, fmt.Errorf("units: %q: want a length such as 2mm, 0.4m or 0.002 (metres)", s)
	}
	for _, r := range num {
		if !strings.ContainsRune("0123456789.eE+-", r) {
			return 0, fmt.Errorf("units: %q: want a length such as 2mm, 0.4m or 0.002 (metres); units are mm, cm and m", s)
		}
	}
	v, err := strconv.ParseFloat(num, 64)
	if err != nil {
		if errors.Is(err, strconv.ErrRange) {
			return 0, fmt.Errorf("units: %q: out of range", s)
		}
		return 0, fmt.Errorf("units: %q: not a number", s)
	}
	v /= div
	if math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, fmt.Errorf("units: %q: out of range", s)
	}
	return v, nil
}

// FormatLength prints metres the way people read them: millimetres
// below one metre ("2mm", "450mm", "0.5mm"), metres from one metre on
// ("1.2m"), with at most four decimals and no trailing
// zeros. ParseLength reads the result back to within that rounding.
func FormatLength(m float64) string {
	if math.IsNaN(m) || math.IsInf(m, 0) {
		return fmt.Sprint(m)
	}
	if math.Abs(m) < 1 {
		return trim(strconv.FormatFloat(m*1000, 'f', 4, 64)) + "mm"
	}
	return trim(strconv.FormatFloat(m, 'f', 4, 64)) + "m"
}

func trim(s string) string {
	if strings.Contains(s, ".") {
		s = strings.TrimRight(s, "0")
		s = strings.TrimSuffix(s, ".")
	}
	if s == "-0" {
		s = "0"
	}
	return s
}

// Length is a flag.Value holding metres, parsed by ParseLength and
// printed by FormatLength, for command-line flags such as
// --distance 45cm.
type Length struct {
	Metres float64
}

// Set parses s with ParseLength.
func (l *Length) Set(s string) error {
	v, err := ParseLength(s)
	if err != nil {
		return err
	}
	l.Metres = v
	return nil
}

// String prints the length with FormatLength.
func (l *Length) String() string {
	if l == nil {
		return ""
	}
	return FormatLength(l.Metres)
}
