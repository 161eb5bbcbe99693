// Command topostate turns a resting-state fMRI cohort into a DuckDB
// warehouse of connectivity states, their dynamics and their topology.
package main

import "os"

func main() { os.Exit(run(os.Args, os.Stdin, os.Stdout, os.Stderr)) }
