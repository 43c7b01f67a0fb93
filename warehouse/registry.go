package warehouse

import (
	"context"
	"fmt"
	"slices"
	"strings"
	"sync"
	"time"
)

// Engine describes one engine to the registry: engines register
// themselves in init (warehouse/engines imports them all), and the study
// asks the registry instead of naming engines.
type Engine struct {
	// Name is the warehouse.engine value ("duckdb").
	Name string
	// Default marks the engine of a study that names none.
	Default bool
	// DefaultSchema is output.schema when the study names none.
	DefaultSchema string
	// DSNHint says what a DSN looks like, for messages ("a DuckDB file
	// path").
	DSNHint string
	// ResolveDSN, when set, rewrites a DSN given in a study file found in
	// dir (a relative file path is taken beside the study file).
	ResolveDSN func(dsn, dir string) string
	// Open connects; readOnly for dry runs, study names the session
	// where the engine can.
	Open func(ctx context.Context, dsn string, o OpenOptions) (Warehouse, error)
}

// OpenOptions are how a study opens its warehouse.
type OpenOptions struct {
	ReadOnly bool
	Study    string
	// Wait is how long an engine whose database another process can hold
	// (a DuckDB file) retries opening it before giving up with ErrBusy;
	// 0 gives up at once.
	Wait time.Duration
	// OnBusy, when set, is told once per open that the database is busy
	// and that the engine waits up to wait (the run's log line).
	OnBusy func(err error, wait time.Duration)
	// NoExternalAccess keeps the engine's SQL from reading or writing
	// files and URLs outside the database (warehouse.external_access:
	// false; DuckDB's enable_external_access).
	NoExternalAccess bool
}

var (
	registryMu sync.RWMutex
	registry   = map[string]Engine{}
)

// Register adds an engine; a second engine of the same name is a bug.
func Register(e Engine) {
	registryMu.Lock()
	defer registryMu.Unlock()
	if _, dup := registry[e.Name]; dup {
		panic("warehouse: engine " + e.Name + " registered twice")
	}
	registry[e.Name] = e
}

// Lookup returns the engine of a name.
func Lookup(name string) (Engine, bool) {
	registryMu.RLock()
	defer registryMu.RUnlock()
	e, ok := registry[name]
	return e, ok
}

// Engines returns the registered engines sorted by name.
func Engines() []Engine {
	registryMu.RLock()
	defer registryMu.RUnlock()
	var out []Engine
	for _, e := range registry {
		out = append(out, e)
	}
	slices.SortFunc(out, func(a, b Engine) int { return strings.Compare(a.Name, b.Name) })
	return out
}

// EngineNames returns the registered engines' names, sorted, and the
// default engine's.
func EngineNames() (names []string, def string) {
	for _, e := range Engines() {
		names = append(names, e.Name)
		if e.Default {
			def = e.Name
		}
	}
	return names, def
}

// Open opens the named engine's warehouse. An engine not in this build
// is an error wrapping ErrBadInput.
func Open(ctx context.Context, engine, dsn string, o OpenOptions) (Warehouse, error) {
	e, ok := Lookup(engine)
	if !ok {
		names, _ := EngineNames()
		return nil, fmt.Errorf("%w: warehouse.engine %q is not available in this build; use %s", ErrBadInput, engine, strings.Join(names, " or "))
	}
	return e.Open(ctx, dsn, o)
}
