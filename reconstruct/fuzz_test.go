package reconstruct

import (
	"errors"
	"testing"
)

// FuzzParseManifest checks that any input either fails with an error
// wrapping ErrInvalid or ErrUnsupported, or parses into a manifest
// that encodes and parses back to the same manifest. Seeds:
// testdata/fuzz/FuzzParseManifest (the fixtures of testdata/manifests).
func FuzzParseManifest(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ParseManifest(data)
		if err != nil {
			if !errors.Is(err, ErrInvalid) && !errors.Is(err, ErrUnsupported) {
				t.Fatalf("error %v wraps neither ErrInvalid nor ErrUnsupported", err)
			}
			return
		}
		_ = m.FrameProblems()
		roundTrip(t, m)
	})
}
