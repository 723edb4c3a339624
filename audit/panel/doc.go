// Package panel holds the unit-by-month panel every estimator reads: units
// with their first treated month (−1 for never), weight and cluster, and one
// count series per outcome. WriteCSV and ReadCSV move a panel through CSV
// (loadwake's own export or a user's file), with positioned errors that
// unwrap to ErrInvalid.
package panel
