namespace Bitbudget.Service.Hosting;

/// <summary>The service will not start as configured; the message is one line that says what to change.</summary>
internal sealed class StartupRefusedException(string message) : Exception(message);
