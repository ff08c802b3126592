package ops

import (
	"context"
	"errors"
	"fmt"
	"io"
	"strings"

	"cleanmon/cmd/cleanmon/internal/daemon"
)

// User changes an account on the store while no daemon runs, and prints
// the new password once (add, reset) or that it is done. The error's line
// goes after "cleanmon user OP NAME: ".
func User(ctx context.Context, c daemon.AccountCommand, stdout io.Writer) error {
	pw, err := daemon.ManageAccountOffline(ctx, c)
	if err != nil {
		return &Error{Lines: []string{strings.TrimPrefix(err.Error(), "people: ")}, Usage: errors.Is(err, daemon.ErrUsage), Err: err}
	}
	if pw != "" {
		fmt.Fprintf(stdout, "password of %s (shown once): %s\n", c.Op.Name, pw)
	} else {
		fmt.Fprintf(stdout, "%s %s: done\n", c.Op.Op, c.Op.Name)
	}
	return nil
}
