"""Everything people look at: pictures (tone mapping, heat maps, plots), HTML pages, and the files of a
validation report."""
