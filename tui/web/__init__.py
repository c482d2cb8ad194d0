"""The browser view: ``lobewatch serve`` runs screen commands behind textual-serve."""
