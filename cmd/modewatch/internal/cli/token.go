package cli

import (
	"bufio"
	"context"
	"fmt"
	"strings"

	"golang.org/x/crypto/bcrypt"

	"modewatch/cmd/modewatch/internal/access"
	"modewatch/configs"
)

func init() {
	register(command{name: "token", args: "--name NAME --role read|write", summary: "make an HTTP API token and the hash the configuration stores", run: runToken})
}

func runToken(ctx context.Context, env IO, args []string) error {
	fs := newFlags(env, "token", "--name NAME --role read|write [--stdin]", `
Make a bearer token for the HTTP API. It prints the token once (give it to
its holder; it is not stored anywhere) and the entry for http.tokens or a
line for http.tokens_file, which hold only the token's SHA-256 hash.
With --stdin the token is read from the first line of standard input
instead of being generated (to hash a token you already have).
With --nats it makes a password for a user of the embedded NATS server
instead, and prints its bcrypt hash for server.users.
The name is recorded as "by" of every command given with the token.`)
	var name, role string
	var stdin, natsUser bool
	fs.StringVar(&name, "name", "", "`NAME` of the holder, recorded as \"by\" (required)")
	fs.StringVar(&role, "role", configs.RoleRead, "`ROLE`: read (GET endpoints) or write (also acknowledge, shelve, maintenance, checkpoints)")
	fs.BoolVar(&stdin, "stdin", false, "hash the token given on standard input instead of making one")
	fs.BoolVar(&natsUser, "nats", false, "make a password for a user of the embedded NATS server (server.users) and its bcrypt hash instead")
	if err := parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return usagef("unexpected arguments %q", fs.Args())
	}
	var tok string
	if stdin {
		sc := bufio.NewScanner(env.In)
		if sc.Scan() {
			tok = strings.TrimSpace(sc.Text())
		}
		if len(tok) < 16 {
			return usagef("--stdin: a token of at least 16 characters is required on the first line")
		}
	} else {
		var err error
		if tok, err = access.NewToken(); err != nil {
			return err
		}
	}
	if natsUser {
		h, err := bcrypt.GenerateFromPassword([]byte(tok), 11)
		if err != nil {
			return err
		}
		if !stdin {
			fmt.Fprintf(env.Out, "password (give it to %s; it is shown only now):\n  %s\n\n", name, tok)
		}
		fmt.Fprintf(env.Out, "in server.users (add publish, subscribe, operator):\n  - {name: %s, password: %q}\n", name, h)
		return nil
	}
	t := configs.Token{Name: name, Role: role, Hash: access.HashToken(tok)}
	if err := configs.CheckToken(t); err != nil {
		return usagef("%v", err)
	}
	if !stdin {
		fmt.Fprintf(env.Out, "token (give it to %s; it is shown only now):\n  %s\n\n", name, tok)
	}
	fmt.Fprintf(env.Out, "in http.tokens:\n  - {name: %s, role: %s, hash: %q}\n\nor a line of http.tokens_file:\n  %s %s %s\n",
		t.Name, t.Role, t.Hash, t.Name, t.Role, t.Hash)
	return nil
}
