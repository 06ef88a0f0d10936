package main

import "github.com/urfave/cli/v2"

func gaussCommand() *cli.Command {
	return withUsage(&cli.Command{Name: "gauss", Usage: "Gaussian barycenter (Bures-Wasserstein)", Hidden: true,
		Action: func(c *cli.Context) error { return usagef("gauss: not built yet") }})
}
