# The household host (one per home gateway). Build the shared image first (deploy/Dockerfile, tag fedgrid), then
#   docker build -f deploy/household.Dockerfile -t fedgrid-household deploy
# give the gateway ca.crt and its own H07.pfx only (in ./certs) and run
#   docker run --rm -v $PWD/certs:/certs:ro fedgrid-household --id H07 --households 32 --days 7 \
#       --coordinator https://HOST:5151 --tls /certs
FROM fedgrid
ENTRYPOINT ["/app/fedgrid", "household"]
