package daemon

import (
	"context"
	"errors"
	"fmt"
	"os"

	"cleanmon/cmd/cleanmon/internal/people"
	"cleanmon/cmd/cleanmon/internal/site"
	"cleanmon/cmd/cleanmon/internal/web"
	"cleanmon/store"
)

// ErrStoreInUse: the store is held by a running daemon; accounts are then
// changed on its pages.
var ErrStoreInUse = errors.New("the store is in use by a running cleanmon")

// AccountCommand is one `cleanmon user` change, made on the store while
// no daemon runs.
type AccountCommand struct {
	ConfigPath string // optional: the site's data_dir and accounts policy
	DataDir    string // overrides the configuration's data_dir
	Op         web.AccountOp
}

// ManageAccountOffline opens the store, applies c and closes it; add and
// reset return the generated password. The change is recorded as made by
// the command line (the person at the machine's console, who can write
// the data directory anyway).
func ManageAccountOffline(ctx context.Context, c AccountCommand) (string, error) {
	cfg := &site.Config{}
	if c.ConfigPath != "" {
		var err error
		if cfg, err = site.LoadFile(c.ConfigPath); err != nil {
			return "", asUsage(err)
		}
	}
	dir := c.DataDir
	if dir == "" {
		dir = cfg.DataDir
	}
	if dir == "" {
		return "", usage("no data directory: give --data DIR (or --config FILE with data_dir)")
	}
	// A new site may make its first account before the daemon's first
	// start, in a directory it created; a mistyped directory must not
	// become a new, empty store holding the account.
	if fi, err := os.Stat(dir); err != nil || !fi.IsDir() {
		return "", usage("no data directory %s: create it first for a new site", dir)
	}
	st, err := store.Open(dir, store.Options{LockTimeout: storeLockWait})
	switch {
	case errors.Is(err, store.ErrLocked):
		return "", fmt.Errorf("%w in %s: stop it first, or make the change as an admin on its accounts page (/accounts)", ErrStoreInUse, dir)
	case err != nil:
		return "", fmt.Errorf("opening the store in %s: %w", dir, err)
	}
	defer st.Close()
	d, err := people.NewDirectory(accountStore{st}, peopleAudit{st}, nil, policyOf(cfg))
	if err != nil {
		return "", asUsage(err)
	}
	pw, err := manageAccount(ctx, d, nil, "", c.Op)
	if errors.Is(err, people.ErrInvalid) || errors.Is(err, people.ErrExists) || errors.Is(err, people.ErrNotFound) {
		err = asUsage(err)
	}
	return pw, err
}
