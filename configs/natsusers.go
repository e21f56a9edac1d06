package configs

import (
	"fmt"
	"strings"
)

// NATSUser is a user of the embedded NATS server.
type NATSUser struct {
	// Name identifies the user; an operator's commands are recorded with
	// it as "by". Letters, digits, '-' and '_'.
	Name string `yaml:"name"`
	// Password is the bcrypt hash of the user's password ("$2a$…"; made
	// by "modewatch token --nats"); the server compares it. Or NKey, the
	// user's public NKey ("U…"). Exactly one.
	Password string `yaml:"password"`
	NKey     string `yaml:"nkey"`
	// Publish and Subscribe are the subjects (wildcards allowed) the user
	// may publish to and subscribe to. Empty allows none.
	Publish   []string `yaml:"publish"`
	Subscribe []string `yaml:"subscribe"`
	// Operator lets the user give commands (acknowledge, shelve,
	// maintenance) as requests on <prefix>.control.<name>, the only
	// control subject it may publish on, so the service knows who sent
	// them; replies come on the user's _INBOX subjects.
	Operator bool `yaml:"operator"`
}

// ControlSubject returns the subject on which the operator called name
// gives commands.
func (c *Config) ControlSubject(name string) string {
	return c.Server.Prefix + ".control." + name
}

// NATSPublish returns the subjects user u may publish to, its operator
// subject included.
func (c *Config) NATSPublish(u NATSUser) []string {
	out := append([]string(nil), u.Publish...)
	if u.Operator {
		out = append(out, c.ControlSubject(u.Name))
	}
	return out
}

// NATSSubscribe returns the subjects user u may subscribe to; an operator
// also gets _INBOX.> for the replies to its commands.
func (c *Config) NATSSubscribe(u NATSUser) []string {
	out := append([]string(nil), u.Subscribe...)
	if u.Operator {
		out = append(out, "_INBOX.>")
	}
	return out
}

func isBcrypt(s string) bool {
	return len(s) == 60 && (strings.HasPrefix(s, "$2a$") || strings.HasPrefix(s, "$2b$") || strings.HasPrefix(s, "$2y$"))
}

func (c *Config) validateNATSUsers(v *validator) {
	s := c.Server
	if len(s.Users) > 0 && len(s.URLs) > 0 {
		v.add("server.users", "users configure the embedded server; with urls, give the users to that server")
	}
	seen := map[string]bool{}
	control := c.Server.Prefix + ".control"
	for i, u := range s.Users {
		p := fmt.Sprintf("server.users[%d]", i)
		switch {
		case u.Name == "" || strings.ContainsAny(u.Name, " \t.*>"):
			v.add(p+".name", "%q: a name without spaces, '.', '*' or '>' is required", u.Name)
		case seen[u.Name]:
			v.add(p+".name", "%q twice", u.Name)
		case u.Name == "modewatch-service":
			v.add(p+".name", "%q is the service's own user", u.Name)
		}
		seen[u.Name] = true
		switch {
		case (u.Password == "") == (u.NKey == ""):
			v.add(p, "give exactly one of password (a bcrypt hash) and nkey")
		case u.Password != "" && !isBcrypt(u.Password):
			v.add(p+".password", "not a bcrypt hash ($2a$…, 60 characters): store the hash, never the password (modewatch token --nats makes one)")
		case u.NKey != "" && (len(u.NKey) != 56 || u.NKey[0] != 'U'):
			v.add(p+".nkey", "%q is not a user public NKey (56 characters starting with U)", u.NKey)
		}
		for j, subj := range u.Publish {
			if !validSubject(subj) {
				v.add(fmt.Sprintf("%s.publish[%d]", p, j), "%q is not a valid subject", subj)
			} else if subj == control || coversControl(subj, control) {
				v.add(fmt.Sprintf("%s.publish[%d]", p, j), "%q reaches the control subjects: use operator: true, which allows %s.%s only", subj, control, u.Name)
			}
		}
		for j, subj := range u.Subscribe {
			if !validSubject(subj) {
				v.add(fmt.Sprintf("%s.subscribe[%d]", p, j), "%q is not a valid subject", subj)
			}
		}
	}
}

// coversControl reports whether the subject pattern matches some subject
// <control>.<user> (the two patterns intersect): then a user could give
// commands in another's name.
func coversControl(pattern, control string) bool {
	pt := strings.Split(pattern, ".")
	ct := append(strings.Split(control, "."), "*")
	for i, t := range pt {
		if t == ">" {
			return true
		}
		if i >= len(ct) || (t != "*" && ct[i] != "*" && t != ct[i]) {
			return false
		}
	}
	return len(pt) == len(ct)
}
