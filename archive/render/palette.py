"""Our colours, shared by the plots and the site's charts."""

PALETTE = ["#1b6f8a", "#c9642b", "#5a8f3c", "#8a4f9e", "#b0353f", "#6b6b6b", "#d1a23b"]
