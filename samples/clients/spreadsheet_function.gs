// A custom spreadsheet function that sends two sheet ranges to nearwise and returns the
// predictions as a table that spills into the cells below and to the right.
//
//   =NEARWISE_PREDICT(A1:C401, E1:F9, "power_kw", "spline")
//
// Each range starts with a header row holding the column names; empty cells are sent as null
// and wholly empty rows are skipped. The answer has the columns value, lower, upper and flags,
// one row per query row. If the service refuses the request, the cells show the problem
// instead: its status and title, the detail, and each place at fault. A pointer such as
// /train/rows/12/1 means data row 12 (counted from 0), so range row 14, counting the header
// as row 1, and its column 2.
//
// The script runs on the spreadsheet provider's servers, not on your computer: NEARWISE_URL
// must be an address those servers can reach (a public HTTPS address, not 127.0.0.1).
const NEARWISE_URL = "https://nearwise.example.org";
// The service's API key when it runs with NEARWISE_API_KEYS (sent as a bearer token), or "".
// Anyone who can edit the spreadsheet's script can read it.
const NEARWISE_API_KEY = "";

/**
 * Predictions, error bounds and flags from nearwise for the rows of a query range.
 *
 * @param {A1:C401} train The training table, a header row first.
 * @param {E1:F9} query The rows to predict at, a header row first (the feature columns).
 * @param {"power_kw"} target The column of train to predict.
 * @param {"spline"} method knn, linear, spline, additive or auto (the default).
 * @return A table: value, lower, upper and flags per query row.
 * @customfunction
 */
function NEARWISE_PREDICT(train, query, target, method) {
  const body = {
    method: method || "auto",
    target: target,
    train: toTable(train),
    query: toTable(query),
  };
  const resp = UrlFetchApp.fetch(NEARWISE_URL.replace(/\/+$/, "") + "/v1/predict", {
    method: "post",
    contentType: "application/json",
    payload: JSON.stringify(body),
    muteHttpExceptions: true, // read problem+json answers instead of failing
    headers: NEARWISE_API_KEY ? { Authorization: "Bearer " + NEARWISE_API_KEY } : {},
  });
  const answer = JSON.parse(resp.getContentText());
  if (resp.getResponseCode() >= 400) {
    return problemRows(answer);
  }
  const rows = [["value", "lower", "upper", "flags"]];
  for (const p of answer.predictions) {
    rows.push([p.value, blank(p.lower), blank(p.upper), p.flags.join(" ")]);
  }
  return rows;
}

// A sheet range (rows of cells, the first holding the names) as a nearwise table.
function toTable(range) {
  const [columns, ...rows] = range;
  const filled = rows.filter((row) => row.some((cell) => cell !== ""));
  return {
    columns: columns.map(String),
    rows: filled.map((row) => row.map((cell) => (cell === "" ? null : cell))),
  };
}

// An RFC 9457 problem as rows of text: status and title, detail, then each place at fault.
function problemRows(problem) {
  const rows = [["error " + problem.status + ": " + problem.title], [problem.detail]];
  for (const err of problem.errors || []) {
    const where = err.pointer || err.part + " line " + err.line + ", column " + err.column;
    rows.push([where + ": " + err.message]);
  }
  return rows;
}

function blank(x) {
  return x === null ? "" : x;
}
