"""What Bellwether can do: one callable per capability, called alike by the HTTP routes,
the job tasks and the CLI."""
