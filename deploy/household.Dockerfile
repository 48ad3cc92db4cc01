# The household host (one per home gateway). Build the shared image first (deploy/Dockerfile, tag fedgrid), then
#   docker build -f deploy/household.Dockerfile -t fedgrid-household deploy
#   docker run --rm --network host fedgrid-household --id H01 --households 32 --days 1 --seed 1 \
#       --coordinator http://127.0.0.1:5151 --insecure-loopback
FROM fedgrid
ENTRYPOINT ["/app/fedgrid", "household"]
