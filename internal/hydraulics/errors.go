package hydraulics

import "errors"

// Sentinel causes wrapped by every error of this package, for errors.Is.
var (
	// ErrInvalid marks a parameter that makes no physical sense (a
	// non-positive bore, a NaN, a table that is not monotone).
	ErrInvalid = errors.New("invalid parameter")
	// ErrOutOfRange marks a valid-looking input outside the range a law or
	// table covers (a setting beyond a valve's table, a Kv it cannot reach).
	ErrOutOfRange = errors.New("out of range")
	// ErrUnknown marks a name not found in a catalogue.
	ErrUnknown = errors.New("unknown name")
)
