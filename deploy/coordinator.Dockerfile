# The coordinator host (one per feeder). Build the shared image first (deploy/Dockerfile, tag fedgrid), then
#   docker build -f deploy/coordinator.Dockerfile -t fedgrid-coordinator deploy
# make the run's certificates (fedgrid certificates --out certs --households 32 --server-name HOST) and run
#   docker run --rm -p 5151:5151 -v $PWD/certs:/certs:ro fedgrid-coordinator \
#       --households 32 --days 7 --address 0.0.0.0 --port 5151 --tls /certs
FROM fedgrid
EXPOSE 5151
ENTRYPOINT ["/app/fedgrid", "coordinator"]
