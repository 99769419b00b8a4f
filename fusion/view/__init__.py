"""Everything that draws: the live terminal view, scrubbing, terminal summaries, HTML pages and plots.

Jobs return results; these render them.  No job imports from here."""
