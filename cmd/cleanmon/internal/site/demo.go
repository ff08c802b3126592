package site

import _ "embed"

// demoSiteYAML is the invented demo site, the one source of it: the
// daemon embeds it and the tests read it.
//
//go:embed demo-site.yaml
var demoSiteYAML []byte

// Demo is the embedded demo site, checked like any configuration.
func Demo() (*Config, error) { return Load("demo-site.yaml", demoSiteYAML) }
