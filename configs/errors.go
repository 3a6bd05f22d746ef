package configs

import "github.com/godwit-fusion/godwit/configs/yamlstrict"

// origin prefixes every configuration message with "configs".
type origin struct{}

func (origin) Prefix() string { return "configs" }

// Error is one problem found in a configuration file, located by file and
// line and named by the field path (e.g. sensors[1].noise_sd). File is the
// base name as given to Parse, or the path given to Load. It formats as
// "configs: FILE:LINE: PATH MSG".
type Error = yamlstrict.Error[origin]

// ErrorList holds every problem of one configuration, in file order where
// they have a line. Parse and Load return it so a person can fix them all in
// one pass instead of one per run.
type ErrorList = yamlstrict.ErrorList[origin]
