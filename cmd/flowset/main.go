// Command flowset fits a water-circuit survey to a hydraulic model, finds
// what is off design and why, and plans balancing-valve settings and the pump
// set-point in one visit. See README.md.
package main

import (
	"context"
	"os"
	"os/signal"
	"syscall"

	"flowset/internal/cli"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	go func() {
		// The first signal cancels the run, which stops cleanly; a second
		// one then ends the process at once (the next run to the same
		// output removes what that leaves).
		<-ctx.Done()
		stop()
	}()
	code := cli.Run(ctx, os.Args[1:], os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}
