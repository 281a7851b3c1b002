package operator

import (
	"fmt"
	"strings"
	"time"

	"stopgap/stream/console"
)

// Editor makes changes to a Store as one actor, within a Policy, and records
// each in the profile's history. The zero value is not usable: Store and
// Policy are required.
type Editor struct {
	Store  *Store
	Policy Policy
	Actor  Actor
	// User is the account behind the changes, recorded in the history
	// ("" = not known).
	User string
	// Now is the clock of the history entries; nil means time.Now.
	Now func() time.Time
}

// Set is a change to one profile; nil fields are left as they are.
type Set struct {
	Cutoff    *float64
	LabelSize *LabelSize
	Notes     *string
	// Activate makes the profile the active one.
	Activate bool
	// Reason is the free-text why, Run the tuning run behind the value;
	// both go into every history entry the change makes.
	Reason, Run string
}

func (e *Editor) now() time.Time {
	if e.Now != nil {
		return e.Now().UTC()
	}
	return time.Now().UTC()
}

// record appends a history entry to p.
func (e *Editor) record(p *Profile, act Action, from, to, reason, run string, proposal int) {
	p.History = append(p.History, Change{Seq: len(p.History) + 1, Time: e.now(), Actor: e.Actor, User: e.User,
		Action: act, From: from, To: to, Reason: reason, Run: run, Proposal: proposal})
}

func (e *Editor) checkText(reason string) error {
	return validText("reason", reason, MaxReasonBytes)
}

// Add creates a profile with the given cutoff (and the active one if the
// store was empty). Refused unless the policy allows the actor "add" and the
// cutoff is within its limits.
func (e *Editor) Add(name string, cutoff float64, s Set) (Snapshot, error) {
	if err := e.Policy.CheckAllowed(e.Actor, ActionAdd); err != nil {
		return Snapshot{}, err
	}
	if err := console.ValidProfileName(name); err != nil {
		return Snapshot{}, fmt.Errorf("%w: %w", ErrBadValue, err)
	}
	if err := validCutoff(cutoff); err != nil {
		return Snapshot{}, err
	}
	if err := e.Policy.CheckCutoff(cutoff); err != nil {
		return Snapshot{}, err
	}
	if err := e.checkText(s.Reason); err != nil {
		return Snapshot{}, err
	}
	return e.Store.Update(func(snap *Snapshot) error {
		if snap.Find(name) >= 0 {
			return fmt.Errorf("%w: %q; change it with set", ErrProfileExists, name)
		}
		if len(snap.Profiles) >= console.MaxProfiles {
			return fmt.Errorf("%w: the store holds %d profiles, at most %d; remove one first", ErrBadValue, len(snap.Profiles), console.MaxProfiles)
		}
		p := Profile{Name: name, Cutoff: cutoff}
		e.record(&p, ActionAdd, "", "cutoff "+fmtFloat(cutoff), s.Reason, s.Run, 0)
		snap.Profiles = append(snap.Profiles, p)
		if snap.Active == "" {
			snap.Active = name
		}
		i := len(snap.Profiles) - 1
		s.Cutoff = nil
		return e.applySet(snap, i, s)
	})
}

// Change applies s to the named profile. Every field that changes is
// checked against the policy (the actor must be allowed the action, a
// cutoff must be within the limits) before anything is written, and makes
// one history entry. A field set to its current value makes no entry.
func (e *Editor) Change(name string, s Set) (Snapshot, error) {
	if err := e.checkSet(s); err != nil {
		return Snapshot{}, err
	}
	return e.Store.Update(func(snap *Snapshot) error {
		i := snap.Find(name)
		if i < 0 {
			return unknown(snap, name)
		}
		return e.applySet(snap, i, s)
	})
}

// checkSet checks s against the policy and the value rules.
func (e *Editor) checkSet(s Set) error {
	if s.Cutoff != nil {
		if err := e.Policy.CheckAllowed(e.Actor, ActionCutoff); err != nil {
			return err
		}
		if err := validCutoff(*s.Cutoff); err != nil {
			return err
		}
		if err := e.Policy.CheckCutoff(*s.Cutoff); err != nil {
			return err
		}
	}
	if s.LabelSize != nil {
		if err := e.Policy.CheckAllowed(e.Actor, ActionLabelSize); err != nil {
			return err
		}
		if _, err := ParseLabelSize(string(*s.LabelSize)); err != nil {
			return err
		}
	}
	if s.Notes != nil {
		if err := e.Policy.CheckAllowed(e.Actor, ActionNotes); err != nil {
			return err
		}
		if err := validText("notes", *s.Notes, MaxNotesBytes); err != nil {
			return err
		}
	}
	if s.Activate {
		if err := e.Policy.CheckAllowed(e.Actor, ActionSelect); err != nil {
			return err
		}
	}
	if err := validText("run", s.Run, MaxReasonBytes); err != nil {
		return err
	}
	return e.checkText(s.Reason)
}

// applySet changes profile i of snap (already checked).
func (e *Editor) applySet(snap *Snapshot, i int, s Set) error {
	p := &snap.Profiles[i]
	if s.Cutoff != nil && *s.Cutoff != p.Cutoff {
		e.record(p, ActionCutoff, fmtFloat(p.Cutoff), fmtFloat(*s.Cutoff), s.Reason, s.Run, 0)
		p.Cutoff = *s.Cutoff
	}
	if s.LabelSize != nil && *s.LabelSize != p.LabelSize {
		e.record(p, ActionLabelSize, string(p.LabelSize), string(*s.LabelSize), s.Reason, s.Run, 0)
		p.LabelSize = *s.LabelSize
	}
	if s.Notes != nil && *s.Notes != p.Notes {
		e.record(p, ActionNotes, p.Notes, *s.Notes, s.Reason, s.Run, 0)
		p.Notes = *s.Notes
	}
	if s.Activate && snap.Active != p.Name {
		e.record(p, ActionSelect, snap.Active, p.Name, s.Reason, s.Run, 0)
		snap.Active = p.Name
	}
	return nil
}

// Remove deletes the named profile with its history. The active profile can
// be removed only when it is the last one.
func (e *Editor) Remove(name string) (Snapshot, error) {
	if err := e.Policy.CheckAllowed(e.Actor, ActionRemove); err != nil {
		return Snapshot{}, err
	}
	return e.Store.Update(func(snap *Snapshot) error {
		i := snap.Find(name)
		if i < 0 {
			return unknown(snap, name)
		}
		if snap.Active == name && len(snap.Profiles) > 1 {
			return fmt.Errorf("%w: %q is the active profile; select another one first (operator set NAME --activate)", ErrBadValue, name)
		}
		snap.Profiles = append(snap.Profiles[:i], snap.Profiles[i+1:]...)
		if len(snap.Profiles) == 0 {
			snap.Active = ""
		}
		return nil
	})
}

// Propose records a recommended cutoff for the named profile without
// applying it. run names the tuning run, reason summarises the evidence
// (e.g. the confidence interval). The actor must be allowed "propose" and
// the cutoff must be within the policy's limits.
func (e *Editor) Propose(name string, cutoff float64, run, reason string) (Snapshot, error) {
	if err := e.Policy.CheckAllowed(e.Actor, ActionPropose); err != nil {
		return Snapshot{}, err
	}
	if err := validCutoff(cutoff); err != nil {
		return Snapshot{}, err
	}
	if err := e.Policy.CheckCutoff(cutoff); err != nil {
		return Snapshot{}, err
	}
	if err := e.checkText(reason); err != nil {
		return Snapshot{}, err
	}
	if err := validText("run", run, MaxReasonBytes); err != nil {
		return Snapshot{}, err
	}
	return e.Store.Update(func(snap *Snapshot) error {
		i := snap.Find(name)
		if i < 0 {
			return unknown(snap, name)
		}
		p := &snap.Profiles[i]
		e.record(p, ActionPropose, fmtFloat(p.Cutoff), fmtFloat(cutoff), reason, run, 0)
		return nil
	})
}

// Apply sets the named profile's cutoff to a recorded proposal: the one
// with history number seq, or the newest when seq is 0. The proposal is
// checked against the policy in force now (it may have changed since).
func (e *Editor) Apply(name string, seq int, reason string) (Snapshot, error) {
	if err := e.Policy.CheckAllowed(e.Actor, ActionApply); err != nil {
		return Snapshot{}, err
	}
	if err := e.checkText(reason); err != nil {
		return Snapshot{}, err
	}
	return e.Store.Update(func(snap *Snapshot) error {
		i := snap.Find(name)
		if i < 0 {
			return unknown(snap, name)
		}
		p := &snap.Profiles[i]
		var prop Change
		ok := false
		if seq == 0 {
			prop, ok = p.LastProposal()
		} else if seq >= 1 && seq <= len(p.History) && p.History[seq-1].Action == ActionPropose {
			prop, ok = p.History[seq-1], true
		}
		if !ok {
			return fmt.Errorf("%w: profile %q (seq %d); see its history with operator show", ErrNoProposal, name, seq)
		}
		var c float64
		if _, err := fmt.Sscan(prop.To, &c); err != nil || validCutoff(c) != nil {
			return fmt.Errorf("%w: proposal %d of %q holds %q, not a cutoff", ErrBadValue, prop.Seq, name, prop.To)
		}
		if err := e.Policy.CheckCutoff(c); err != nil {
			return err
		}
		if reason == "" {
			reason = fmt.Sprintf("applied proposal %d", prop.Seq)
		}
		e.record(p, ActionApply, fmtFloat(p.Cutoff), prop.To, reason, prop.Run, prop.Seq)
		p.Cutoff = c
		return nil
	})
}

func unknown(snap *Snapshot, name string) error {
	names := make([]string, len(snap.Profiles))
	for i, p := range snap.Profiles {
		names[i] = p.Name
	}
	known := strings.Join(names, ", ")
	if known == "" {
		known = "none (add one with operator add)"
	}
	return fmt.Errorf("%w %q; known profiles: %s", ErrUnknownProfile, name, known)
}
