package units

import (
	"flag"
	"math"
	"strings"
	"testing"
)

func TestParseLength(t *testing.T) {
	// Expected values are the float64 literals themselves: IEEE 754
	// division is correctly rounded, so an integer or exactly
	// representable count of millimetres divided by 1000 is the
	// nearest float64 to the decimal value (IEEE 754-2008, §5.4.1).
	cases := []struct {
		in   string
		want float64
	}{
		{"2mm", 0.002},
		{"0.002", 0.002},
		{"0.4m", 0.4},
		{"25cm", 0.25},
		{" 3 mm ", 0.003},
		{"2.5mm", 0.0025},
		{"1e-3", 0.001},
		{"1e-3m", 0.001},
		{"450mm", 0.45},
		{"-5mm", -0.005},
		{"0", 0},
	}
	for _, c := range cases {
		got, err := ParseLength(c.in)
		if err != nil {
			t.Errorf("ParseLength(%q): %v", c.in, err)
			continue
		}
		if got != c.want {
			t.Errorf("ParseLength(%q) = %v, want %v", c.in, got, c.want)
		}
	}
}

func TestParseLengthErrors(t *testing.T) {
	for _, in := range []string{"", "mm", " m", "2km", "2 inch", "NaN", "inf", "Infmm", "2mmm", "0x1p3", "1e999", "1,5mm", "2MM", "--2"} {
		if v, err := ParseLength(in); err == nil {
			t.Errorf("ParseLength(%q) = %v, want an error", in, v)
		} else if !strings.HasPrefix(err.Error(), "units: ") {
			t.Errorf("error %q lacks the package prefix", err)
		}
	}
}

func TestFormatLength(t *testing.T) {
	cases := []struct {
		in   float64
		want string
	}{
		{0.002, "2mm"},
		{0.45, "450mm"},
		{0.0005, "0.5mm"},
		{1.2, "1.2m"},
		{0, "0mm"},
		{-0.003, "-3mm"},
		{0.00012346, "0.1235mm"},
	}
	for _, c := range cases {
		if got := FormatLength(c.in); got != c.want {
			t.Errorf("FormatLength(%v) = %q, want %q", c.in, got, c.want)
		}
		back, err := ParseLength(FormatLength(c.in))
		// Four decimals of the printed unit: within 5e-5 mm = 5e-8 m.
		if err != nil || math.Abs(back-c.in) > 5e-8 {
			t.Errorf("ParseLength(FormatLength(%v)) = %v, %v", c.in, back, err)
		}
	}
}

func TestLengthFlag(t *testing.T) {
	fs := flag.NewFlagSet("x", flag.ContinueOnError)
	l := &Length{Metres: 0.45}
	fs.Var(l, "distance", "camera distance")
	if err := fs.Parse([]string{"-distance", "52cm"}); err != nil {
		t.Fatal(err)
	}
	if l.Metres != 0.52 || l.String() != "520mm" {
		t.Errorf("flag = %v (%s)", l.Metres, l)
	}
	fs.SetOutput(new(strings.Builder))
	if err := fs.Parse([]string{"-distance", "52 furlongs"}); err == nil {
		t.Error("bad flag value accepted")
	}
}
