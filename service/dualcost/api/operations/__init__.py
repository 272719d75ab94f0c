"""One module per operation: translate the request once, make one core call under one error
translation, and build the answer for :mod:`dualcost.api.render`."""
