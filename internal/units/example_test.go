package units_test

import (
	"fmt"

	"github.com/scanfold/scanfold/internal/units"
)

func ExampleParseLength() {
	for _, s := range []string{"2mm", "0.002", "0.4m", "25cm"} {
		v, _ := units.ParseLength(s)
		fmt.Println(s, "=", v, "m =", units.FormatLength(v))
	}
	// Output:
	// 2mm = 0.002 m = 2mm
	// 0.002 = 0.002 m = 2mm
	// 0.4m = 0.4 m = 400mm
	// 25cm = 0.25 m = 250mm
}
