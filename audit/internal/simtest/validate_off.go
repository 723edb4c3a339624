//go:build !validate

package simtest

// Validate is true in builds with the validate tag (make validate): tests
// then run their long versions (the default-size simulated worlds, hundreds
// of worlds per study).
const Validate = false
