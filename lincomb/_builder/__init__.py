"""Private layer of lincomb; see DEVELOPERS.md."""
