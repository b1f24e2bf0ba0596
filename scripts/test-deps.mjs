// Before the tests: the reference checks run Debian's /usr/bin/python3 with NumPy, h5py and
// hdf5plugin (and scikit-learn for the statistics checks); the application's end-to-end tests
// drive Debian's chromium. Install the missing Debian packages when we can (root with apt-get,
// as on CI); otherwise stop at once with the one command to run.
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';

const PYTHON = '/usr/bin/python3';
const MODULES = [['numpy', 'python3-numpy'], ['h5py', 'python3-h5py'], ['hdf5plugin', 'python3-hdf5plugin'], ['sklearn', 'python3-sklearn'], ['scipy', 'python3-scipy'], ['PIL', 'python3-pil']];

const CHROMIUM = '/usr/bin/chromium';

function missing() {
  const browser = fs.existsSync(CHROMIUM) ? [] : ['chromium'];
  if (!fs.existsSync(PYTHON)) return MODULES.map(([, pkg]) => pkg).concat('python3', ...browser);
  return MODULES.filter(([mod]) => spawnSync(PYTHON, ['-c', `import ${mod}`], { stdio: 'ignore' }).status !== 0).map(([, pkg]) => pkg).concat(browser);
}

const need = missing();
if (need.length === 0) process.exit(0);
const command = `apt-get install -y ${need.join(' ')}`;
const canInstall = process.getuid?.() === 0 && spawnSync('sh', ['-c', 'command -v apt-get'], { stdio: 'ignore' }).status === 0;
if (!canInstall) {
  console.error(`npm test: the tests need Debian's ${need.join(', ')}; run: sudo ${command}`);
  process.exit(1);
}
console.error(`npm test: installing Debian packages the tests need: ${need.join(' ')}`);
const env = { ...process.env, DEBIAN_FRONTEND: 'noninteractive' };
for (const args of [['update', '-qq'], ['install', '-y', '-qq', ...need]]) {
  const r = spawnSync('apt-get', args, { stdio: 'inherit', env });
  if (r.status !== 0) {
    console.error(`npm test: apt-get ${args.join(' ')} failed; run: ${command}`);
    process.exit(1);
  }
}
const still = missing();
if (still.length) {
  console.error(`npm test: still missing after installing: ${still.join(', ')}`);
  process.exit(1);
}
