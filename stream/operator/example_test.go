package operator_test

import (
	"fmt"
	"os"
	"path/filepath"
	"time"

	"stopgap/stream/operator"
)

// A tuning run records a recommended cutoff as a proposal, within the
// administrator's policy; an operator or supervisor applies it from the
// command line.
func ExampleEditor_Propose() {
	dir, _ := os.MkdirTemp("", "operators")
	defer os.RemoveAll(dir)
	store := operator.NewStore(filepath.Join(dir, "operators.json"))
	pol, _ := operator.ParsePolicy("/etc/stopgap/policy.json", []byte(`{"min_cutoff": 0.5, "max_cutoff": 0.9}`))
	now := func() time.Time { return time.Date(2026, 3, 1, 9, 0, 0, 0, time.UTC) }

	cli := operator.Editor{Store: store, Policy: pol, Actor: operator.ActorCLI, User: "supervisor", Now: now}
	cli.Add("alice", 0.6, operator.Set{Reason: "new operator"})

	tune := operator.Editor{Store: store, Policy: pol, Actor: operator.ActorTune, Now: now}
	if _, err := tune.Propose("alice", 0.95, "fit-1", ""); err != nil {
		fmt.Println(err)
	}
	tune.Propose("alice", 0.8, "fit-2", "95% interval 0.7 to 0.9")
	snap, _ := cli.Apply("alice", 0, "")
	operator.WriteShow(os.Stdout, snap.Profiles[0], true)
	// Output:
	// refused: cutoff 0.95 is outside the administrator's limit max_cutoff = 0.9 set in the policy file /etc/stopgap/policy.json; stay within it or ask the administrator to change max_cutoff
	// profile     alice (active)
	// cutoff      0.8
	// label size  normal
	//
	// history:
	// #  WHEN (UTC)            WHO               WHAT     FROM  TO          WHY
	// 1  2026-03-01T09:00:00Z  cli (supervisor)  add      -     cutoff 0.6  new operator
	// 2  2026-03-01T09:00:00Z  tune              propose  0.6   0.8         95% interval 0.7 to 0.9 [run fit-2]
	// 3  2026-03-01T09:00:00Z  cli (supervisor)  apply    0.6   0.8         applied proposal 2 [run fit-2]
}
