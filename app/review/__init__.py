"""The rules of deciding, shared by the web pages, the JSON API and the command line: a verdict
on one series (:mod:`.decisions`), bulk approval of firm suggestions (:mod:`.bulk`), the
forecast check of an order (:mod:`.forecast_check`) and the hand-off export (:mod:`.export`)."""
