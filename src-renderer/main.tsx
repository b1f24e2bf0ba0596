import { createRoot } from 'react-dom/client';
import { App } from './App';
import { connectDesktop, connectServed, desktopShell } from './connection';
import { Store } from './store';

const root = createRoot(document.getElementById('root')!);
const shell = desktopShell();
(shell ? connectDesktop() : connectServed()).then(
  (client) => root.render(<App client={client} store={new Store()} shell={shell} />),
  (e: Error) => root.render(<div className="error" role="alert">{e.message}</div>),
);
