/**
 * Carried by every report trueshift hands out, on the command line and over HTTP: a change judged on
 * statistics alone can still hurt people or plant.
 */
export const CAUTION =
  'Caution: statistical evidence does not replace management-of-change review, hazard analysis, ' +
  'local codes or licensed engineering practice. trueshift alerts are advisory and are not a safety function.';
