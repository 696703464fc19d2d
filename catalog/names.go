package catalog

import (
	"fmt"
	"strconv"
	"strings"
)

// MaxNameLen is the longest part name or role, in bytes.
const MaxNameLen = 64

// maxRevision bounds revision numbers read from references and the
// index; 2³¹ − 1 revisions of one part will not be filed.
const maxRevision = 1<<31 - 1

// windowsReserved are device names that Windows will not create as
// files, whatever the extension (Microsoft, "Naming Files, Paths, and
// Namespaces", from memory). A part name may become a folder or file
// name on an integrator's machine, so they are refused everywhere.
var windowsReserved = map[string]bool{
	"con": true, "prn": true, "aux": true, "nul": true,
	"com0": true, "com1": true, "com2": true, "com3": true, "com4": true,
	"com5": true, "com6": true, "com7": true, "com8": true, "com9": true,
	"lpt0": true, "lpt1": true, "lpt2": true, "lpt3": true, "lpt4": true,
	"lpt5": true, "lpt6": true, "lpt7": true, "lpt8": true, "lpt9": true,
}

// ValidateName reports whether name may be a part name: 1 to 64 ASCII
// letters, digits, '-', '_' and '.'; not starting with '.' (which also
// rules out "." and "..": no escaping the folder, no hidden files) or
// '-' (a shell would read it as an option); not ending with '.'
// (Windows drops it); and not a Windows device name such as "con" or
// "nul.txt". The error wraps ErrBadName and says what is wrong.
func ValidateName(name string) error { return validateWord("part name", name) }

// ValidateRole reports whether role may name a blob of a revision. The
// rules are those of ValidateName, because a role becomes a file name
// on export.
func ValidateRole(role string) error { return validateWord("role", role) }

func validateWord(what, s string) error {
	bad := func(why string, args ...any) error {
		return fmt.Errorf("%w: %s %q: %s", ErrBadName, what, s, fmt.Sprintf(why, args...))
	}
	if s == "" {
		return bad("empty; use 1 to %d letters, digits, '-', '_' or '.'", MaxNameLen)
	}
	if len(s) > MaxNameLen {
		return bad("%d bytes long, at most %d allowed", len(s), MaxNameLen)
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !('a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' || '0' <= c && c <= '9' || c == '-' || c == '_' || c == '.') {
			return bad("byte %d (%q) is not allowed; use ASCII letters, digits, '-', '_' or '.'", i, c)
		}
	}
	switch {
	case s[0] == '.':
		return bad("must not start with '.' (no \".\", \"..\" or hidden names)")
	case s[0] == '-':
		return bad("must not start with '-' (a shell would read it as an option)")
	case s[len(s)-1] == '.':
		return bad("must not end with '.'")
	}
	base, _, _ := strings.Cut(strings.ToLower(s), ".")
	if windowsReserved[base] {
		return bad("%q is a reserved device name on Windows", base)
	}
	return nil
}

// ParseRef parses a reference "NAME" or "NAME@REV". REV is a revision
// number 1, 2, 3… written without sign or leading zeros; without it
// ParseRef returns rev 0, which the Store's methods read as "the
// latest". Errors wrap ErrBadName.
func ParseRef(ref string) (name string, rev int, err error) {
	name, revText, hasRev := strings.Cut(ref, "@")
	if err := ValidateName(name); err != nil {
		return "", 0, fmt.Errorf("%w (in reference %q)", err, ref)
	}
	if !hasRev {
		return name, 0, nil
	}
	bad := func(why string) error {
		return fmt.Errorf("%w: reference %q: revision %q %s", ErrBadName, ref, revText, why)
	}
	if revText == "" {
		return "", 0, bad("is empty; write NAME or NAME@REV with REV 1, 2, 3…")
	}
	for i := 0; i < len(revText); i++ {
		if c := revText[i]; c < '0' || c > '9' {
			return "", 0, bad("is not a number (only digits 0-9 allowed)")
		}
	}
	if revText[0] == '0' {
		return "", 0, bad("must be 1 or more, without leading zeros")
	}
	n, err := strconv.ParseInt(revText, 10, 64)
	if err != nil || n > maxRevision {
		return "", 0, bad(fmt.Sprintf("is larger than %d", maxRevision))
	}
	return name, int(n), nil
}

// FormatRef is the inverse of ParseRef: "NAME" for rev 0, else
// "NAME@REV".
func FormatRef(name string, rev int) string {
	if rev == 0 {
		return name
	}
	return name + "@" + strconv.Itoa(rev)
}
