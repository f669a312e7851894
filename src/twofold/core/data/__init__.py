"""Reading data files and deciding what each column is."""
