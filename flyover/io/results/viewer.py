"""``viewer.html``: an interactive view of the campaign's results, one self-contained page for
the browser (pick a pass, step through its windows and bands, hover and click the regions; the
plotting library inlined, so it opens offline from the results folder and fetches nothing but
the listening files beside it)."""

NAME = "viewer.html"
