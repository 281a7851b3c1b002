package operator

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"
	"time"
)

// StoreEnv names the environment variable that overrides DefaultStorePath.
const StoreEnv = "STOPGAP_OPERATORS"

// DefaultStorePath returns where the relay and "stopgap operator" keep the
// profile store unless told otherwise: $STOPGAP_OPERATORS, else
// operators.json in the user's configuration directory
// ($XDG_CONFIG_HOME/stopgap or ~/.config/stopgap on Linux).
func DefaultStorePath() string {
	if p := os.Getenv(StoreEnv); p != "" {
		return p
	}
	dir, err := os.UserConfigDir()
	if err != nil {
		dir = "."
	}
	return filepath.Join(dir, "stopgap", "operators.json")
}

// WriteList writes one line per profile: active mark, name, cutoff, label
// size, number of changes and the newest pending proposal, if any.
func WriteList(w io.Writer, snap Snapshot) error {
	if len(snap.Profiles) == 0 {
		_, err := fmt.Fprintln(w, "no profiles; add one with: stopgap operator add NAME --cutoff C")
		return err
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "\tNAME\tCUTOFF\tLABEL\tCHANGES\tPROPOSAL")
	for _, p := range snap.Profiles {
		mark := ""
		if p.Name == snap.Active {
			mark = "*"
		}
		prop := "-"
		if c, ok := p.LastProposal(); ok && !applied(p, c.Seq) {
			prop = fmt.Sprintf("%s (#%d)", c.To, c.Seq)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\t%s\n", mark, p.Name, fmtFloat(p.Cutoff), labelOf(p), len(p.History), prop)
	}
	return tw.Flush()
}

// WriteShow writes one profile with its whole history, oldest first.
func WriteShow(w io.Writer, p Profile, active bool) error {
	fmt.Fprintf(w, "profile     %s", p.Name)
	if active {
		fmt.Fprint(w, " (active)")
	}
	fmt.Fprintf(w, "\ncutoff      %s\nlabel size  %s\n", fmtFloat(p.Cutoff), labelOf(p))
	if p.Notes != "" {
		fmt.Fprintf(w, "notes       %s\n", oneLine(p.Notes))
	}
	fmt.Fprintln(w, "\nhistory:")
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "#\tWHEN (UTC)\tWHO\tWHAT\tFROM\tTO\tWHY")
	for _, c := range p.History {
		who := string(c.Actor)
		if c.User != "" {
			who += " (" + c.User + ")"
		}
		why := c.Reason
		if c.Run != "" {
			why = strings.TrimSpace(why + " [run " + c.Run + "]")
		}
		if c.Action == ActionPropose && !applied(p, c.Seq) {
			why = strings.TrimSpace(why + " (not applied: stopgap operator apply " + p.Name + ")")
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\t%s\t%s\n", c.Seq, c.Time.UTC().Format(time.RFC3339), who, c.Action,
			dash(oneLine(c.From)), dash(oneLine(c.To)), oneLine(why))
	}
	return tw.Flush()
}

func applied(p Profile, seq int) bool {
	for _, c := range p.History {
		if c.Action == ActionApply && c.Proposal == seq {
			return true
		}
	}
	return false
}

func labelOf(p Profile) string {
	if p.LabelSize == "" {
		return string(LabelNormal)
	}
	return string(p.LabelSize)
}

func dash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

// oneLine keeps a table row on one line and at most 60 characters.
func oneLine(s string) string {
	s = strings.Join(strings.Fields(s), " ")
	if r := []rune(s); len(r) > 60 {
		s = string(r[:57]) + "..."
	}
	return s
}

// EnsureProfile makes sure the store has at least one profile: when it is
// empty it adds "default" at cutoff, as the command line would, with the
// reason given; otherwise it does nothing. The cutoff must be within the
// policy.
func EnsureProfile(store *Store, pol Policy, user string, cutoff float64, reason string) error {
	snap, err := store.Load()
	if err != nil || len(snap.Profiles) > 0 {
		return err
	}
	e := Editor{Store: store, Policy: pol, Actor: ActorCLI, User: user}
	_, err = e.Add("default", cutoff, Set{Reason: reason})
	if err != nil && !isExists(err) {
		return err
	}
	return nil
}

func isExists(err error) bool { return errors.Is(err, ErrProfileExists) }
