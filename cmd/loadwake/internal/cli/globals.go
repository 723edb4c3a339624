package cli

// Globals holds the flags every command shares. One value is built in
// main and passed by pointer to each newXCommand.
type Globals struct {
	Store string // directory of the Badger history store
	Quiet bool   // no progress output
}

// EnvStore names the environment variable holding the default store.
const EnvStore = "LOADWAKE_STORE"

// NewGlobals returns the defaults: the store of $LOADWAKE_STORE, read
// through getenv, or ./loadwake.db.
func NewGlobals(getenv func(string) string) *Globals {
	g := &Globals{Store: "./loadwake.db"}
	if s := getenv(EnvStore); s != "" {
		g.Store = s
	}
	return g
}
