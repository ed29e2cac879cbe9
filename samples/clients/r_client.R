# Post a request body to nearwise and print the predictions, or the error it explains.
#
#   Rscript samples/clients/r_client.R                                   # the turbine spline sample
#   Rscript samples/clients/r_client.R samples/predict_warehouse.json
#   Rscript samples/clients/r_client.R samples/compare_warehouse.json compare
#   NEARWISE_URL=http://host:9000 Rscript samples/clients/r_client.R
#   NEARWISE_API_KEY=your-key Rscript samples/clients/r_client.R          # sent as a bearer token
#
# Needs R 4.1 or newer and the httr2 package. Run it from the repository root (the default body
# path is relative). Exits with status 1 when the service answers with an error.
library(httr2)

args <- commandArgs(trailingOnly = TRUE)
body_path <- if (length(args) >= 1) args[[1]] else "samples/predict_spline.json"
endpoint <- if (length(args) >= 2) args[[2]] else "predict"
base <- sub("/+$", "", Sys.getenv("NEARWISE_URL", "http://127.0.0.1:8080"))
key <- Sys.getenv("NEARWISE_API_KEY", "")

fmt <- function(x) if (is.null(x)) "-" else format(signif(x, 6))

show_problem <- function(problem) {
  cat(sprintf("error %s: %s\n%s\n", problem$status, problem$title, problem$detail))
  for (err in problem$errors) {
    where <- if (!is.null(err$pointer)) err$pointer else
      sprintf("%s line %s, column %s", err$part, err$line, err$column)
    cat(sprintf("  %s: %s\n", where, err$message))
  }
}

show_answer <- function(answer) {
  doc <- if (!is.null(answer$prediction)) answer$prediction else answer  # compare nests it
  if (!is.null(answer$recommended)) {
    cat(sprintf("recommended: %s (%s)\n", answer$recommended, answer$reason))
  }
  cat(sprintf("method %s, cross-validated error %s\n", doc$method, fmt(doc$fit$cv_error)))
  cat("row\tvalue\tlower\tupper\tflags\n")
  for (i in seq_along(doc$predictions)) {
    p <- doc$predictions[[i]]
    flags <- paste(unlist(p$flags), collapse = " ")
    cat(sprintf("%d\t%s\t%s\t%s\t%s\n", i - 1, fmt(p$value), fmt(p$lower), fmt(p$upper), flags))
  }
  for (w in doc$warnings) cat(sprintf("warning %s: %s\n", w$code, w$message))
}

req <- request(base) |>
  req_url_path_append("v1", endpoint) |>
  req_body_file(body_path, type = "application/json")
if (nzchar(key)) req <- req_auth_bearer_token(req, key)
resp <- req |>
  req_timeout(120) |>
  req_error(is_error = \(resp) FALSE) |>  # read problem+json ourselves
  req_perform()

if (resp_content_type(resp) == "application/problem+json") {
  show_problem(resp_body_json(resp))
  quit(status = 1)
}
if (resp_is_error(resp)) stop(sprintf("HTTP %d %s", resp_status(resp), resp_status_desc(resp)))
show_answer(resp_body_json(resp))
