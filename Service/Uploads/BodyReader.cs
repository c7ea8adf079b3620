using System.Globalization;
using Bitbudget.Service.Problems;
using Microsoft.AspNetCore.Http.Features;

namespace Bitbudget.Service.Uploads;

/// <summary>Reads a raw upload body into memory, refusing (413) anything over the endpoint's limit before and while reading.</summary>
internal static class BodyReader
{
    public static async Task<byte[]> ReadAsync(HttpRequest request, long limitBytes, string what, CancellationToken cancellationToken)
    {
        if (request.ContentLength > limitBytes)
        {
            throw TooLarge(what, limitBytes);
        }

        // Let Kestrel enforce this endpoint's limit rather than its 30 MB default.
        if (request.HttpContext.Features.Get<IHttpMaxRequestBodySizeFeature>() is { IsReadOnly: false } sizeFeature)
        {
            sizeFeature.MaxRequestBodySize = limitBytes + 1;
        }

        using var buffer = new MemoryStream(request.ContentLength is { } length ? (int)Math.Min(length, int.MaxValue) : 1 << 16);
        var chunk = new byte[1 << 16];
        int read;
        while ((read = await request.Body.ReadAsync(chunk, cancellationToken).ConfigureAwait(false)) > 0)
        {
            if (buffer.Length + read > limitBytes)
            {
                throw TooLarge(what, limitBytes);
            }

            buffer.Write(chunk, 0, read);
        }

        if (buffer.Length == 0)
        {
            throw ServiceException.Invalid("body", $"The request body is empty; send the {what}'s bytes as application/octet-stream.");
        }

        return buffer.ToArray();
    }

    private static ServiceException TooLarge(string what, long limitBytes) => new(
        StatusCodes.Status413PayloadTooLarge,
        ProblemTypes.PayloadTooLarge,
        $"The {what} is larger than the {limitBytes.ToString(CultureInfo.InvariantCulture)} bytes this service accepts; raise the limit in the service's settings or send a smaller file.");
}
