// Command barygrid averages 2-D intensity fields by optimal transport.
//
// Run "barygrid help" for the commands; README.md shows the common uses.
package main
