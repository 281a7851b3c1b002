package operator

import (
	"errors"
	"fmt"

	"stopgap/stream/console"
)

// ConsoleStore lets the relay's console keep its profiles in a Store: it
// implements console.ProfileStore. Changes are made as ActorConsole within
// the Editor's policy and recorded in the history with the reason "operator
// console".
type ConsoleStore struct {
	e Editor
}

// NewConsoleStore returns the console's view of store under policy.
func NewConsoleStore(store *Store, policy Policy) *ConsoleStore {
	return &ConsoleStore{e: Editor{Store: store, Policy: policy, Actor: ActorConsole}}
}

// Load returns the stored profiles (name and cutoff) and the active one.
func (c *ConsoleStore) Load() ([]console.Profile, string, error) {
	snap, err := c.e.Store.Load()
	if err != nil {
		return nil, "", consoleErr(c.e.Store.Path(), err)
	}
	return toConsole(snap)
}

// Apply carries out req on the newest stored state: select a profile,
// change the active profile's cutoff, or both (creating the profile if the
// policy allows the console to add). Refusals are *PolicyError.
func (c *ConsoleStore) Apply(req console.CutoffRequest) ([]console.Profile, string, error) {
	s := Set{Cutoff: req.Cutoff, Reason: "operator console"}
	if err := c.e.checkSet(s); err != nil {
		return nil, "", err
	}
	if req.Profile != nil {
		if err := c.e.Policy.CheckAllowed(ActorConsole, ActionSelect); err != nil {
			return nil, "", err
		}
	}
	snap, err := c.e.Store.Update(func(snap *Snapshot) error {
		name := snap.Active
		if req.Profile != nil {
			name = *req.Profile
			s.Activate = true
		}
		i := snap.Find(name)
		if i < 0 && req.Profile != nil && req.Cutoff != nil {
			if err := c.e.Policy.CheckAllowed(ActorConsole, ActionAdd); err != nil {
				return err
			}
			if len(snap.Profiles) >= console.MaxProfiles {
				return fmt.Errorf("%w: at most %d; reuse an existing one", console.ErrTooManyProfiles, console.MaxProfiles)
			}
			p := Profile{Name: name, Cutoff: *req.Cutoff}
			c.e.record(&p, ActionAdd, "", "cutoff "+fmtFloat(p.Cutoff), s.Reason, "", 0)
			snap.Profiles = append(snap.Profiles, p)
			i = len(snap.Profiles) - 1
		}
		if i < 0 {
			return fmt.Errorf("%w: %w", console.ErrUnknownProfile, unknown(snap, name))
		}
		return c.e.applySet(snap, i, s)
	})
	if err != nil {
		return nil, "", consoleErr(c.e.Store.Path(), err)
	}
	return toConsole(snap)
}

func toConsole(snap Snapshot) ([]console.Profile, string, error) {
	out := make([]console.Profile, len(snap.Profiles))
	for i, p := range snap.Profiles {
		out[i] = console.Profile{Name: p.Name, Cutoff: p.Cutoff}
	}
	return out, snap.Active, nil
}

// consoleErr turns a store file problem into the console's
// *ProfilesFileError (reported as a server error, change not applied).
func consoleErr(path string, err error) error {
	var fe *FileError
	if errors.As(err, &fe) {
		return &console.ProfilesFileError{Path: fe.Path, Line: fe.Line, Err: fe.Err}
	}
	if errors.Is(err, ErrLockTimeout) {
		return &console.ProfilesFileError{Path: path, Err: err}
	}
	return err
}
