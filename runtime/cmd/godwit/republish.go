package main

import (
	"github.com/spf13/cobra"
)

func runRepublish(cmd *cobra.Command, f *replayFlags) error {
	return usagef("--to-broker is not ready yet")
}
