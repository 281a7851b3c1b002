package main

import (
	"flag"
	"fmt"
)

// allowanceUsage is the one explanation of --allowance-ms, shared by every
// command that has it (the relay, replay, tune and the demos), so the
// same flag never reads two ways.
const allowanceUsage = "how long after its expected arrival (capture time plus the latency estimate) a frame may come " +
	"and still be shown LIVE; later, its tick is filled instead, ms"

// deprecatedAlias keeps an old flag name working as an alias of the flag
// now called name, which must already be defined: it sets that flag and
// prints a warning on fs.Output() each time it is used, so scripts keep
// running but learn the new name.
func deprecatedAlias(fs *flag.FlagSet, old, name string) {
	target := fs.Lookup(name)
	if target == nil {
		panic("deprecatedAlias: no flag --" + name) // a wiring mistake in this package, caught by its tests
	}
	fs.Func(old, "deprecated: use --"+name, func(s string) error {
		fmt.Fprintf(fs.Output(), "stopgap %s: --%s is deprecated and will be removed; use --%s\n", fs.Name(), old, name)
		return target.Value.Set(s)
	})
}
