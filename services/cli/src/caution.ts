// The text lives in @trueshift/config so the API and the command line print the same words.
export { CAUTION } from '@trueshift/config';
