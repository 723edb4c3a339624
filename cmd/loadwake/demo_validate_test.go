//go:build validate

package main

// demoGrid is the districts per side of TestDemoAndReport's world under make
// validate.
const demoGrid = 6
