package validate

// Timing is the wall-clock time of one stage of a check or comparison.
type Timing struct {
	Stage   string  `json:"stage"`
	Seconds float64 `json:"seconds"`
}
