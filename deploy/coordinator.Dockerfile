# The coordinator host (one per feeder). Build the shared image first (deploy/Dockerfile, tag fedgrid), then
#   docker build -f deploy/coordinator.Dockerfile -t fedgrid-coordinator deploy
# and run it on the host's network (plain text is refused off loopback until mutual TLS lands):
#   docker run --rm --network host fedgrid-coordinator --households 32 --days 1 --seed 1 --port 5151 --insecure-loopback
FROM fedgrid
EXPOSE 5151
ENTRYPOINT ["/app/fedgrid", "coordinator"]
