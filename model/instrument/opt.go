package instrument

// Opt is a value that a source (a flag, a burst header, weights metadata, a
// site file) may or may not give. The zero Opt is unset; an explicit zero is
// an Opt with Set true and V zero, and is never mistaken for "unset".
type Opt[T any] struct {
	V   T    // the value; meaningful only when Set
	Set bool // whether the source gave a value
}

// Some returns an Opt holding v.
func Some[T any](v T) Opt[T] { return Opt[T]{V: v, Set: true} }

// Or returns the value if set, else d.
func (o Opt[T]) Or(d T) T {
	if o.Set {
		return o.V
	}
	return d
}

// Get returns the value and whether it is set.
func (o Opt[T]) Get() (T, bool) { return o.V, o.Set }
