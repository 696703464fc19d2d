package catalog

import (
	"errors"
	"strings"
	"testing"
)

func TestValidateName(t *testing.T) {
	cases := []struct {
		name string
		ok   bool
	}{
		{"bracket", true},
		{"hex-nut_M8.v2", true},
		{"A", true},
		{"0", true},
		{strings.Repeat("a", 64), true},
		{"com10", true}, // only COM0–COM9 are reserved
		{"console", true},
		{"", false},
		{strings.Repeat("a", 65), false},
		{".", false},
		{"..", false},
		{"../x", false},
		{"a/b", false},
		{`a\b`, false},
		{"/abs", false},
		{".hidden", false},
		{"-rf", false},
		{"trailing.", false},
		{"con", false},
		{"CON", false},
		{"con.txt", false},
		{"nul", false},
		{"aux.ply", false},
		{"com1", false},
		{"LPT9", false},
		{"prn", false},
		{"a b", false},
		{"a\tb", false},
		{"a\x00b", false},
		{"\x00", false},
		{"bräcket", false}, // unicode letters are refused (ASCII only)
		{"ﬁle", false},
		{"naïve", false},
		{"a@1", false},
		{"a:b", false},
		{"a*b", false},
		{"a?b", false},
		{"$HOME", false},
		{"a;rm", false},
		{"a|b", false},
		{"`x`", false},
		{"a'b", false},
		{`a"b`, false},
		{"~user", false},
		{"a\nb", false},
	}
	for _, c := range cases {
		err := ValidateName(c.name)
		if c.ok && err != nil {
			t.Errorf("ValidateName(%q) = %v, want nil", c.name, err)
		}
		if !c.ok {
			if !errors.Is(err, ErrBadName) {
				t.Errorf("ValidateName(%q) = %v, want ErrBadName", c.name, err)
			} else if !strings.HasPrefix(err.Error(), "catalog: ") {
				t.Errorf("error %q lacks the package prefix", err)
			}
		}
	}
}

func TestParseRef(t *testing.T) {
	cases := []struct {
		in   string
		name string
		rev  int
		ok   bool
	}{
		{"bracket", "bracket", 0, true},
		{"bracket@1", "bracket", 1, true},
		{"nut@42", "nut", 42, true},
		{"nut@2147483647", "nut", 2147483647, true},
		{"nut@2147483648", "", 0, false},
		{"nut@99999999999999999999", "", 0, false},
		{"nut@", "", 0, false},
		{"nut@0", "", 0, false},
		{"nut@01", "", 0, false},
		{"nut@-1", "", 0, false},
		{"nut@+1", "", 0, false},
		{"nut@1@2", "", 0, false},
		{"nut@ 1", "", 0, false},
		{"nut@latest", "", 0, false},
		{"@1", "", 0, false},
		{"", "", 0, false},
		{"../x@1", "", 0, false},
	}
	for _, c := range cases {
		name, rev, err := ParseRef(c.in)
		if c.ok {
			if err != nil || name != c.name || rev != c.rev {
				t.Errorf("ParseRef(%q) = %q, %d, %v; want %q, %d", c.in, name, rev, err, c.name, c.rev)
			}
			if got := FormatRef(name, rev); got != c.in {
				t.Errorf("FormatRef(%q, %d) = %q, want %q", name, rev, got, c.in)
			}
		} else if !errors.Is(err, ErrBadName) {
			t.Errorf("ParseRef(%q) = %q, %d, %v; want ErrBadName", c.in, name, rev, err)
		}
	}
}

// FuzzParseRef: whatever the input, ParseRef never panics, and what it
// accepts is a valid name with a revision in range that formats back to
// the input.
func FuzzParseRef(f *testing.F) {
	for _, s := range []string{"bracket", "nut@3", "a@", "@", "../x", "con@1"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		name, rev, err := ParseRef(s)
		if err != nil {
			if !errors.Is(err, ErrBadName) {
				t.Fatalf("ParseRef(%q) error %v does not wrap ErrBadName", s, err)
			}
			return
		}
		if ValidateName(name) != nil || rev < 0 || rev > maxRevision {
			t.Fatalf("ParseRef(%q) accepted %q, %d", s, name, rev)
		}
		if FormatRef(name, rev) != s {
			t.Fatalf("ParseRef(%q) = %q, %d does not format back", s, name, rev)
		}
	})
}

// FuzzCheckFormat: the FORMAT marker parser never panics, and accepts
// only the magic line followed by a supported layout.
func FuzzCheckFormat(f *testing.F) {
	f.Add([]byte("scanfold catalog\nlayout 1\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		err := checkFormat("FORMAT", data)
		if err == nil && !strings.HasPrefix(string(data), formatMagic+"\nlayout ") {
			t.Fatalf("accepted %q", data)
		}
		if err != nil && !errors.Is(err, ErrNotCatalog) && !errors.Is(err, ErrUnsupported) {
			t.Fatalf("error %v wraps neither ErrNotCatalog nor ErrUnsupported", err)
		}
	})
}
