// Package operator keeps each operator's profile (confidence cutoff, label
// size preference, notes and the history of every change) in a durable
// store shared by the relay's console and the command line, and reads the
// administrator's policy that bounds what any of them may set.
//
// # Store
//
// Store is one JSON file (FileFormat), replaced atomically on every change
// and guarded by a flock(2) lock file beside it; see Store for why files
// rather than an embedded database, and for the crash and concurrency
// guarantees. Editor makes changes as one Actor (console, cli or tune) and
// records each in the profile's History: when, who, what from and to, and
// why (a free-text reason, or the run that recommended the value).
// ConsoleStore plugs the store into the console (console.Config.Store).
//
// A tuning run never changes a cutoff: it records a proposal
// (Editor.Propose); applying it is a separate, explicit action
// (Editor.Apply), checked against the policy in force at that moment.
//
// # Policy
//
// Policy is the administrator's one policy file (DefaultPolicyPath, or
// --policy): the longest prediction horizon, the lowest and highest cutoff
// any profile may use, and which actor may take which Action. Its
// conservative defaults and their reasons are documented at DefaultMinCutoff.
// Every change goes through CheckCutoff, CheckHorizonMs and CheckAllowed;
// tuning code calls CheckProposal. A refusal is a *PolicyError naming the
// limit's key and the file.
package operator
