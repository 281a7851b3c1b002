package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"math"
	"os/user"
	"strings"

	"stopgap/stream/operator"
)

// operatorSubcommands lists "stopgap operator" subcommands in usage order.
var operatorSubcommands = []struct{ name, args, summary string }{
	{"list", "", "list the profiles (* = active)"},
	{"show", "NAME", "show a profile with its whole history"},
	{"add", "NAME --cutoff C", "add a profile"},
	{"set", "NAME [--cutoff C] [--label-size S] [--notes T] [--activate]", "change a profile"},
	{"remove", "NAME", "remove a profile and its history"},
	{"apply", "NAME [--proposal N]", "apply a recorded proposal (the newest by default) as the cutoff"},
	{"fit", "NAME --sessions DIR[,DIR...]", "fit the cutoff to the operator's recorded drives; record it as a proposal"},
}

func runOperator(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	usage := func() {
		fmt.Fprintln(stderr, "usage: stopgap operator SUBCOMMAND [NAME] [flags]")
		fmt.Fprintln(stderr, "\nOperator profiles, kept in the profile store shared with the relay's console;")
		fmt.Fprintln(stderr, "every change is checked against the administrator's policy file and recorded")
		fmt.Fprintln(stderr, "in the profile's history.")
		fmt.Fprintln(stderr)
		for _, s := range operatorSubcommands {
			fmt.Fprintf(stderr, "  %-7s %-61s %s\n", s.name, s.args, s.summary)
		}
		fmt.Fprintln(stderr, "\nRun \"stopgap operator SUBCOMMAND -h\" for its flags.")
	}
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" {
		usage()
		if len(args) == 0 {
			return errUsage
		}
		return flag.ErrHelp
	}
	sub, rest := args[0], args[1:]
	fs := flag.NewFlagSet("operator "+sub, flag.ContinueOnError)
	fs.SetOutput(stderr)
	storePath := fs.String("store", operator.DefaultStorePath(), "profile store `file` (also $"+operator.StoreEnv+")")
	policyPath := fs.String("policy", operator.DefaultPolicyPath, "administrator's policy `file` (missing at the default path: built-in conservative defaults)")
	reason := fs.String("reason", "", "why the change is made (recorded in the history)")
	var cutoff, labelSize, notes *string
	var activate *bool
	var proposal *int
	needName := true
	switch sub {
	case "list":
		needName = false
	case "show", "remove":
	case "add":
		cutoff = fs.String("cutoff", "", "confidence cutoff in [0,1] (required)")
		labelSize = fs.String("label-size", "", "label size: small, normal or large")
		notes = fs.String("notes", "", "free-text notes")
	case "set":
		cutoff = fs.String("cutoff", "", "new confidence cutoff in [0,1]")
		labelSize = fs.String("label-size", "", "new label size: small, normal or large")
		notes = fs.String("notes", "", "new notes (replace the old ones)")
		activate = fs.Bool("activate", false, "make it the profile the console uses")
	case "apply":
		proposal = fs.Int("proposal", 0, "history number of the proposal to apply (0 = the newest)")
	case "fit":
		return runOperatorFit(fs, rest, storePath, policyPath, stdout, stderr)
	default:
		fmt.Fprintf(stderr, "stopgap operator: unknown subcommand %q\n\n", sub)
		usage()
		return errUsage
	}
	name := ""
	if needName {
		if len(rest) == 0 || strings.HasPrefix(rest[0], "-") {
			if len(rest) > 0 && (rest[0] == "-h" || rest[0] == "--help") {
				fs.Usage()
				return flag.ErrHelp
			}
			fmt.Fprintf(stderr, "stopgap operator %s: give the profile NAME first\n", sub)
			return errUsage
		}
		name, rest = rest[0], rest[1:]
	}
	if err := parse(fs, rest); err != nil {
		return err
	}
	explicit := false
	fs.Visit(func(f *flag.Flag) { explicit = explicit || f.Name == "policy" })
	pol, err := operator.LoadPolicy(*policyPath, explicit)
	if err != nil {
		return err
	}
	store := operator.NewStore(*storePath)
	ed := operator.Editor{Store: store, Policy: pol, Actor: operator.ActorCLI, User: loginName()}
	set := operator.Set{Reason: *reason}
	given := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { given[f.Name] = true })
	if cutoff != nil && given["cutoff"] {
		c, err := parseCutoff(*cutoff)
		if err != nil {
			return err
		}
		set.Cutoff = &c
	}
	if labelSize != nil && given["label-size"] {
		l, err := operator.ParseLabelSize(*labelSize)
		if err != nil {
			return err
		}
		set.LabelSize = &l
	}
	if notes != nil && given["notes"] {
		set.Notes = notes
	}
	if activate != nil {
		set.Activate = *activate
	}

	var snap operator.Snapshot
	switch sub {
	case "list":
		if snap, err = store.Load(); err == nil {
			err = operator.WriteList(stdout, snap)
		}
		return err
	case "show":
		if snap, err = store.Load(); err != nil {
			return err
		}
		i := snap.Find(name)
		if i < 0 {
			return fmt.Errorf("%w %q; list them with: stopgap operator list --store %s", operator.ErrUnknownProfile, name, store.Path())
		}
		return operator.WriteShow(stdout, snap.Profiles[i], snap.Active == name)
	case "add":
		if set.Cutoff == nil {
			fmt.Fprintln(stderr, "stopgap operator add: --cutoff is required")
			return errUsage
		}
		c := *set.Cutoff
		set.Cutoff = nil
		snap, err = ed.Add(name, c, set)
	case "set":
		if set.Cutoff == nil && set.LabelSize == nil && set.Notes == nil && !set.Activate {
			fmt.Fprintln(stderr, "stopgap operator set: nothing to change; give --cutoff, --label-size, --notes or --activate")
			return errUsage
		}
		snap, err = ed.Change(name, set)
	case "remove":
		snap, err = ed.Remove(name)
	case "apply":
		snap, err = ed.Apply(name, *proposal, *reason)
	}
	if err != nil {
		return err
	}
	if i := snap.Find(name); i >= 0 {
		return operator.WriteShow(stdout, snap.Profiles[i], snap.Active == name)
	}
	fmt.Fprintf(stdout, "removed %s\n", name)
	return nil
}

// parseCutoff parses a --cutoff value.
func parseCutoff(s string) (float64, error) {
	var c float64
	if _, err := fmt.Sscan(s, &c); err != nil || math.IsNaN(c) || c < 0 || c > 1 {
		return 0, fmt.Errorf("--cutoff %q: want a confidence in [0, 1]", s)
	}
	return c, nil
}

// loginName is the account recorded in the history ("" if unknown).
func loginName() string {
	if u, err := user.Current(); err == nil {
		return u.Username
	}
	return ""
}
