package main

import (
	"flag"
	"fmt"
	"io"
	"strings"
	"time"

	"stopgap/bench/opfit"
	"stopgap/filter"
	"stopgap/stream/operator"
)

// runOperatorFit runs "stopgap operator fit NAME --sessions ...": the
// fit's flags are added to fs (which holds --store, --policy, --reason).
func runOperatorFit(fs *flag.FlagSet, args []string, storePath, policyPath *string, stdout, stderr io.Writer) error {
	sessions := fs.String("sessions", "", "comma-separated recording `directories` of this operator, driven at several cutoffs within the policy (relay --record, with the station sending controls)")
	reactionMs := fs.Float64("reaction-ms", opfit.DefaultReactionMs, "assumed delay from a picture to the operator's response, ms")
	recoveryMs := fs.Float64("recovery-ms", opfit.DefaultRecoveryMs, "how long after a gap its consequences are counted, ms")
	lookaheadM := fs.Float64("lookahead-m", 10, "lookahead of the pure pursuit reference follower, m")
	wheelbaseM := fs.Float64("wheelbase-m", filter.DefaultWheelbaseM, "vehicle wheelbase, m")
	bootstrap := fs.Int("bootstrap", opfit.DefaultBootstrap, "bootstrap resamplings for the interval")
	run := fs.String("run", "", "name of this fit run, recorded with the proposal (default fit-<UTC time>)")
	if len(args) == 0 || strings.HasPrefix(args[0], "-") {
		fmt.Fprintln(stderr, "stopgap operator fit: give the profile NAME first")
		return errUsage
	}
	name, args := args[0], args[1:]
	if err := parse(fs, args); err != nil {
		return err
	}
	if *sessions == "" {
		fmt.Fprintln(stderr, "stopgap operator fit: --sessions is required")
		return errUsage
	}
	explicit := false
	fs.Visit(func(f *flag.Flag) { explicit = explicit || f.Name == "policy" })
	pol, err := operator.LoadPolicy(*policyPath, explicit)
	if err != nil {
		return err
	}
	store := operator.NewStore(*storePath)
	snap, err := store.Load()
	if err != nil {
		return err
	}
	if snap.Find(name) < 0 {
		return fmt.Errorf("%w %q; add it first with: stopgap operator add", operator.ErrUnknownProfile, name)
	}
	var ss []opfit.Session
	for _, dir := range splitList(*sessions) {
		s, err := opfit.LoadSession(dir)
		if err != nil {
			return fmt.Errorf("--sessions: %w", err)
		}
		ss = append(ss, s)
	}
	ac := opfit.AttributionConfig{ReactionMs: *reactionMs, RecoveryMs: *recoveryMs,
		Follower: opfit.PurePursuit{LookaheadM: *lookaheadM, WheelbaseM: *wheelbaseM}}
	samples, err := opfit.Samples(ss, ac)
	if err != nil {
		return err
	}
	gaps, err := opfit.GapCosts(ss, ac)
	if err != nil {
		return err
	}
	fmt.Fprint(stdout, opfit.Describe(samples, opfit.FitConfig{}))
	if rates, err := opfit.ReversalRates(ss, *reactionMs, opfit.ReversalConfig{}); err == nil {
		fmt.Fprintf(stdout, "steering reversals per minute (%.1f Hz filter, %.0f° steering-wheel gap, ratio %.0f): LIVE %.1f, PREDICTED %.1f, STALE %.1f\n",
			opfit.DefaultReversalCutoffHz, opfit.DefaultReversalGapDeg, opfit.DefaultSteeringRatio,
			rates[opfit.ShownLive], rates[opfit.ShownPredicted], rates[opfit.ShownStale])
	}
	rec := opfit.Recommend(gaps, opfit.FitConfig{Bootstrap: *bootstrap})
	fmt.Fprint(stdout, rec)
	if !rec.OK {
		fmt.Fprintln(stdout, "nothing proposed")
		return nil
	}
	id := *run
	if id == "" {
		id = "fit-" + time.Now().UTC().Format("20060102T150405Z")
	}
	why := fmt.Sprintf("fit over %d gaps of %d drives: 95%% interval %.2f to %.2f", len(gaps), len(ss), rec.CILo, rec.CIHi)
	tune := operator.Editor{Store: store, Policy: pol, Actor: operator.ActorTune, User: loginName()}
	snap, err = tune.Propose(name, rec.Cutoff, id, why)
	if err != nil {
		return fmt.Errorf("the recommended cutoff was not recorded: %w", err)
	}
	p := snap.Profiles[snap.Find(name)]
	fmt.Fprintf(stdout, "proposal #%d recorded in %s's history (run %s); apply it with: stopgap operator apply %s\n",
		p.History[len(p.History)-1].Seq, name, id, name)
	return nil
}
