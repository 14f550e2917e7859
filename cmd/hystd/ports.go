package main

import (
	"encoding/json"
	"fmt"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"

	"hystd/drivers/link"
)

func init() { register(newPortsCmd) }

func newPortsCmd() *cobra.Command {
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "ports",
		Short: "List serial ports with their USB identity",
		Long: "ports lists the serial ports of this machine with the USB vendor id, product id\n" +
			"and serial number of each adapter, and the stable /dev/serial/by-id names.\n" +
			"Use the identity in a fixture (usb: {vid, pid, serial}) so that an adapter is\n" +
			"found again when it re-enumerates under a new name. The list is read from\n" +
			"sysfs; no port is opened, so it is safe while a fixture is running.",
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			ports, err := link.ListPorts(cmd.Context())
			if err != nil {
				return fmt.Errorf("listing serial ports: %w", err)
			}
			out := cmd.OutOrStdout()
			if asJSON {
				enc := json.NewEncoder(out)
				enc.SetIndent("", "  ")
				if ports == nil {
					ports = []link.PortInfo{}
				}
				return enc.Encode(ports)
			}
			if len(ports) == 0 {
				fmt.Fprintln(out, "no serial ports found")
				return nil
			}
			w := tabwriter.NewWriter(out, 0, 4, 2, ' ', 0)
			fmt.Fprintln(w, "PORT\tUSB ID\tSERIAL\tDRIVER\tDESCRIPTION")
			for _, p := range ports {
				id, desc := "-", "-"
				if p.USB {
					id = strings.ToLower(p.VID + ":" + p.PID)
					desc = strings.TrimSpace(p.Manufacturer + " " + p.Product)
				}
				fmt.Fprintf(w, "%s\t%s\t%s\t%s\t%s\n", p.Path, id, dash(p.Serial), dash(p.Driver), dash(desc))
				for _, l := range p.ByID {
					fmt.Fprintf(w, "  %s\t\t\t\t\n", l)
				}
			}
			return w.Flush()
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print the list as JSON")
	return cmd
}

func dash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}
